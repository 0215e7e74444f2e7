"""A stored settings or site record with one value the current limits refuse keeps every other
part, and the whole record as it was is set aside before any save could overwrite it (common
practice for record keeping: a later validation rule never silently discards stored data)."""

from __future__ import annotations

import json

from core.records.models import InstrumentLog, ProgramSettings, Site
from core.store import DeviceStore
from core.store.tables import salvage


def _write_table(path, name, docs):
    path.write_text(json.dumps({name: {str(i + 1): d for i, d in enumerate(docs)}}), encoding="utf-8")


def _settings_doc(**extra):
    doc = ProgramSettings(
        program="Test program",
        instruments=[InstrumentLog(serial="M-1", drift_limit=0.3), InstrumentLog(serial="M-2")],
        reporting_decimals={"do_mg_l": 2},
    ).model_dump(mode="json")
    doc.update(extra)
    return doc


def test_one_bad_setting_keeps_the_rest_and_a_copy(tmp_path):
    store = DeviceStore.open(tmp_path / "d")
    # 450 % was accepted by an earlier version; the limit is now 100–300 % (a meter reads at most 300 %)
    _write_table(store.data_dir / "settings.json", "settings", [_settings_doc(supersaturation_percent=450.0)])
    s = store.settings()
    assert [i.serial for i in s.instruments] == ["M-1", "M-2"] and s.instruments[0].drift_limit == 0.3
    assert s.reporting_decimals == {"do_mg_l": 2} and s.program == "Test program"
    assert s.supersaturation_percent == ProgramSettings().supersaturation_percent  # the default, for now
    copies = [p for p in store.quarantined() if p.name.startswith("settings.json.")]
    assert len(copies) == 1
    assert json.loads(copies[0].read_bytes())["supersaturation_percent"] == 450.0
    assert "supersaturation_percent" in copies[0].with_name(copies[0].name + ".reason.txt").read_text()
    # a save from the settings screen keeps the instruments; a second reader makes no second copy
    store.save_settings(s.model_copy(update={"warm_min_mg_l": 5.5}))
    again = DeviceStore.open(store.data_dir).settings()
    assert [i.serial for i in again.instruments] == ["M-1", "M-2"] and again.warm_min_mg_l == 5.5
    assert len([p for p in store.quarantined() if p.name.startswith("settings.json.")]) == 1


def test_one_bad_instrument_log_costs_only_that_log():
    doc = _settings_doc()
    doc["instruments"][1]["drift_limit"] = -1.0  # must be > 0
    s, dropped = salvage(ProgramSettings, doc)
    assert s is not None and [i.serial for i in s.instruments] == ["M-1"] and dropped == ["instruments.1"]


def test_a_site_keeps_its_valid_fields_and_one_without_an_id_is_set_aside(tmp_path):
    store = DeviceStore.open(tmp_path / "d")
    good = Site(id="S-1", name="Upper ford", elevation_m=120.0, min_do_mg_l=6.0).model_dump(mode="json")
    good["supersaturation_percent"] = 450.0
    nameless = Site(id="S-2", name="x", elevation_m=10.0).model_dump(mode="json")
    del nameless["id"]
    _write_table(store.data_dir / "sites.json", "sites", [good, nameless])
    sites = store.sites_by_id()
    assert list(sites) == ["S-1"]
    assert sites["S-1"].min_do_mg_l == 6.0 and sites["S-1"].supersaturation_percent is None
    assert len([p for p in store.quarantined() if p.name.startswith("sites.json.")]) == 2


def test_the_settings_screen_says_what_was_left_out_in_words(tmp_path):
    from mobile.app.controller import AppController

    store = DeviceStore.open(tmp_path / "d")
    doc = _settings_doc(supersaturation_percent=450.0)
    doc["instruments"][1]["drift_limit"] = -1.0
    _write_table(store.data_dir / "settings.json", "settings", [doc])
    notice = AppController(store).settings_notice()
    assert "Supersaturation threshold" in notice and "Instruments no. 2" in notice
    assert "supersaturation_percent" not in notice and "quarantine" in notice


def test_junk_in_the_tables_reads_as_defaults_and_is_kept(tmp_path):
    # common practice: a hand-edited or damaged file never stops the app; what was there is kept aside
    store = DeviceStore.open(tmp_path / "d")
    (store.data_dir / "settings.json").write_text(json.dumps({"settings": {"1": "not a record"}}), encoding="utf-8")
    (store.data_dir / "sites.json").write_text(
        json.dumps({"sites": {"1": ["x"], "2": {"id": "S-9", "name": "Ok", "elevation_m": "high"}}}), encoding="utf-8"
    )
    assert store.settings() == ProgramSettings()
    assert store.sites_by_id() == {}
    assert {"settings", "site ?", "site S-9"} <= set(store.left_out())
    names = [p.name for p in store.quarantined()]
    assert sum(n.startswith("settings.json.") for n in names) == 1
    assert sum(n.startswith("sites.json.") for n in names) == 2
