"""Stored settings and site records that fail validation in awkward ways still keep every valid part
(common practice for record keeping: one bad stored value never discards the rest)."""

from __future__ import annotations

import json

from core.records.models import InstrumentLog, ProgramSettings
from core.store import DeviceStore
from core.store.tables import salvage


def _log(serial: str) -> dict:
    return InstrumentLog(serial=serial).model_dump(mode="json")


def test_an_instrument_log_with_several_bad_values_costs_only_that_log():
    bad = _log("M-2")
    bad.update(drift_limit=-1.0, zero_do_limit_mg_l=-5.0, barometer_limit_hpa=-2.0)  # each must be > 0
    s, dropped = salvage(ProgramSettings, {"program": "P", "instruments": [_log("M-1"), bad, _log("M-3")]})
    assert s is not None and [i.serial for i in s.instruments] == ["M-1", "M-3"]
    assert dropped == ["instruments.1"]


def test_a_bad_value_inside_a_mapping_costs_only_that_entry():
    s, dropped = salvage(ProgramSettings, {"program": "P", "holding_overrides_h": {"bod": "soon", "do-fixed": 12}})
    assert s is not None and s.holding_overrides_h == {"do-fixed": 12.0}
    assert dropped == ["holding_overrides_h.bod"]


def test_a_value_that_is_not_a_number_in_the_file_costs_only_that_field(tmp_path):
    # Python's json reads NaN, which JSON (RFC 8259) does not allow: a hand-edited file may hold it
    store = DeviceStore.open(tmp_path / "d")
    (store.data_dir / "settings.json").write_text(
        '{"settings": {"1": {"program": "P", "warm_min_mg_l": NaN, "cold_min_mg_l": 7.0}}}', encoding="utf-8"
    )
    s = store.settings()
    assert s.program == "P" and s.cold_min_mg_l == 7.0 and s.warm_min_mg_l == ProgramSettings().warm_min_mg_l
    assert store.left_out()["settings"] == ["warm_min_mg_l"]
    assert len([p for p in store.quarantined() if p.name.startswith("settings.json.")]) == 1


def test_a_deeply_nested_value_costs_only_that_field(tmp_path):
    store = DeviceStore.open(tmp_path / "d")
    deep = '{"bod": ' + "[" * 500 + "]" * 500 + "}"
    (store.data_dir / "settings.json").write_text(
        '{"settings": {"1": {"program": "P", "cold_min_mg_l": 7.0, "holding_overrides_h": ' + deep + "}}}",
        encoding="utf-8",
    )
    s = store.settings()
    assert s.program == "P" and s.cold_min_mg_l == 7.0
    assert store.left_out()["settings"] == ["holding_overrides_h"]


def test_a_file_nested_too_deep_to_read_reads_as_defaults_and_is_kept(tmp_path):
    store = DeviceStore.open(tmp_path / "d")
    deep = "[" * 20000 + "]" * 20000
    (store.data_dir / "settings.json").write_text('{"settings": {"1": {"program": ' + deep + "}}}", encoding="utf-8")
    (store.data_dir / "sites.json").write_text('{"sites": {"1": {"id": ' + deep + "}}}", encoding="utf-8")
    assert store.settings() == ProgramSettings()
    assert store.sites_by_id() == {}
    names = [p.name for p in store.quarantined()]
    assert any(n.startswith("settings.json.") for n in names) and any(n.startswith("sites.json.") for n in names)
    store.save_settings(ProgramSettings(program="Again"))
    assert DeviceStore.open(store.data_dir).settings().program == "Again"


def test_a_record_already_kept_aside_is_not_written_again_by_the_next_reader(tmp_path):
    # common practice: the copy's name carries its content's hash, so one copy per content is enough;
    # rewriting (and syncing to disk) every copy at every start made a long site list slow to open
    store = DeviceStore.open(tmp_path / "d")
    sites = {str(i): {"id": f"S-{i}", "name": "Ford", "elevation_m": 10.0, "latitude": 500.0} for i in range(3)}
    (store.data_dir / "sites.json").write_text(json.dumps({"sites": sites}), encoding="utf-8")
    assert len(store.sites_by_id()) == 3
    copies = store.quarantined()
    kept = [*copies, *(p.with_name(p.name + ".reason.txt") for p in copies)]
    before = {p.name: p.stat().st_ino for p in kept}
    assert len(copies) == 3
    assert len(DeviceStore.open(store.data_dir).sites_by_id()) == 3
    after = {p.name: p.stat().st_ino for p in kept}
    assert after == before


def test_once_the_settings_are_saved_whole_nothing_is_reported_left_out(tmp_path):
    # common practice: a notice names a present problem; after Save the stored record is whole again
    store = DeviceStore.open(tmp_path / "d")
    doc = ProgramSettings(program="P").model_dump(mode="json")
    doc["supersaturation_percent"] = 450.0  # above the 300 % limit
    sites = {"1": {"id": "S-1", "name": "Ford", "elevation_m": 10.0, "latitude": 500.0}}
    (store.data_dir / "settings.json").write_text(json.dumps({"settings": {"1": doc}}), encoding="utf-8")
    (store.data_dir / "sites.json").write_text(json.dumps({"sites": sites}), encoding="utf-8")
    assert store.settings().program == "P" and store.sites_by_id()["S-1"].latitude is None
    assert set(store.left_out()) == {"settings", "site S-1"}
    store.save_settings(store.settings())
    store.save_sites(list(store.sites_by_id().values()))
    assert store.settings().program == "P" and "S-1" in store.sites_by_id()
    assert store.left_out() == {}
