"""The app, the command line and the records refuse the same typed values with the same limits: one
grammar and one table (core.science.quantities.LIMITS). The limits are common practice for stream work."""

from __future__ import annotations

import contextlib
import io

import pytest

from core.records.models import InputError, Site, measure
from core.science.quantities import LIMITS
from core.store import DeviceStore
from mobile.app.controller import AppController
from mobile.cli import main
from tests.app.conftest import seed_sites

INTERNAL = (
    "pressure_hpa",
    "percent_sat",
    "parse_",
    "temp_c",
    "do_mg_l",
    "do_percent",
    "elevation_m",
    "conductivity_us_cm",
)


def cli(*argv: str) -> tuple[int, str]:
    err = io.StringIO()
    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(err):
        try:
            code = main(list(argv))
        except SystemExit as exc:
            code = int(exc.code or 0)
    return code, err.getvalue().strip()


@pytest.fixture(scope="module")
def ctl(tmp_path_factory):
    data = tmp_path_factory.mktemp("data")
    seed_sites(data)
    c = AppController(DeviceStore.open(data))
    f = c.new_trip_form()
    f.program, f.crew, f.meter_id = "Tamsin Valley Stream Watch", "R.O.", "DO-7"
    assert c.start_trip(f, without_calibration=True) is None
    c.new_stop()
    c.set_stop_field("site", "LK-01")
    yield c
    c.worker.flush()


# (stop field, app unit field and unit, CLI option, CLI text, models kind and text, accepted?)
CASES = [
    ("temp", ("temp_unit", "C"), "--temp", "50", ("temp", "50 °C"), True),
    ("temp", ("temp_unit", "C"), "--temp", "50.1", ("temp", "50.1 °C"), False),
    ("temp", ("temp_unit", "C"), "--temp", "-2.5", ("temp", "-2.5 °C"), False),
    ("temp", ("temp_unit", "F"), "--temp", "123 F", ("temp", "123 °F"), False),
    ("pressure", ("pressure_unit", "hPa"), "--pressure", "1100 hPa", ("pressure", "1100 hPa"), True),
    ("pressure", ("pressure_unit", "hPa"), "--pressure", "1e9 hPa", ("pressure", "1e9 hPa"), False),
    ("pressure", ("pressure_unit", "inHg"), "--pressure", "29.92 inHg", ("pressure", "29.92 inHg"), True),
    ("pressure", ("pressure_unit", "hPa"), "--pressure", "29.92 hPa", ("pressure", "29.92 hPa"), False),
    ("conductivity", ("cond_unit", "mS/cm"), "--conductivity", "101 mS/cm", ("conductivity", "101 mS/cm"), False),
    ("conductivity", ("cond_unit", "uS/cm"), "--conductivity", "410 uS/cm", ("conductivity", "410 uS/cm"), True),
    ("do", ("do_unit", "mg/L"), "--do", "25", ("do", "25 mg/L"), True),
    ("do", ("do_unit", "mg/L"), "--do", "60", ("do", "60 mg/L"), False),
    ("do", ("do_unit", "%"), "--do", "300 %", ("do", "300 %"), True),
    ("do", ("do_unit", "%"), "--do", "301 %", ("do", "301 %"), False),
]


@pytest.mark.parametrize("field, unit, option, cli_text, model, accepted", CASES, ids=[f"{c[0]}-{c[3]}" for c in CASES])
def test_same_refusals_everywhere(ctl, field, unit, option, cli_text, model, accepted):
    base = {"--temp": "18", "--pressure": "1000 hPa"}
    base[option] = cli_text
    argv = ["sat"] + [x for k, v in base.items() for x in (k, v)]
    code, err = cli(*argv)
    ctl.set_stop_field(*unit)
    app_text = cli_text.split()[0]
    view = ctl.set_stop_field(field, app_text)
    try:
        measure(model[0], model[1], field=field)
        model_ok = True
    except InputError as exc:
        model_ok = False
        model_msg = exc.message
    assert (code == 0) is accepted and model_ok is accepted and (field not in view.errors) is accepted, (
        err,
        view.errors,
    )
    if not accepted:
        # the same limits, named as each shell names the value; never an internal variable name
        assert err.startswith((f"streamtab: {option}", option)), err
        assert view.errors[field] == model_msg
        lo, hi, _unit_word = LIMITS[{"do": "do_percent" if "%" in cli_text else "do_mg_l"}.get(field, field)]
        span = f"{lo:g}–{hi:g}".replace("-", "\u2212", 1) if lo < 0 else f"{lo:g}–{hi:g}"
        assert span in err and span in model_msg
        for name in INTERNAL:
            assert name not in err and name not in model_msg
    ctl.set_stop_field(field, "")


@pytest.mark.parametrize(
    "text, accepted",
    [("6000", True), ("6000.5", False), ("-430", True), ("-431", False), ("19685 ft", True), ("19700 ft", False)],
)
def test_elevation_limits_are_one(ctl, text, accepted):
    # the site form, the sat command and the Site record: one elevation range (LIMITS["elevation"])
    code, err = cli("sat", "--temp", "18", "--pressure", "1000 hPa", "--elevation", text)
    try:
        ctl.add_site(f"LK-{abs(hash(text)) % 900 + 100}", "Test", text)
        app_ok = True
    except ValueError as exc:
        app_ok = False
        assert "−430–6000 m" in str(exc)
    assert (code == 0) is accepted and app_ok is accepted, err
    if text.endswith("ft"):
        return
    try:
        Site(id="X-1", name="x", elevation_m=float(text))
        model_ok = True
    except Exception:  # noqa: BLE001 - pydantic's ValidationError
        model_ok = False
    assert model_ok is accepted


@pytest.mark.parametrize(
    "text, accepted",
    [("100", True), ("300", True), ("300.5", False), ("500", False), ("99", False), ("1e9", False)],
)
def test_supersaturation_limits_are_one(tmp_path, text, accepted):
    """The site list CSV, the Site and ProgramSettings records, the science's Criteria and the app's settings
    screen take the same supersaturation thresholds (LIMITS["supersaturation"]; common practice: a threshold
    above the highest % saturation a reading may carry, LIMITS["do_percent"], could never fire)."""
    from core.records.exchange import ExchangeError, read_sites_csv
    from core.records.models import ProgramSettings
    from core.science.criteria import Criteria
    from mobile.app.program_prefs import setting_problem

    assert LIMITS["supersaturation"][1] == LIMITS["do_percent"][1]
    path = tmp_path / "sites.csv"
    path.write_text(f"site_id,name,elevation_m,supersaturation_percent\nLK-09,Test,120,{text}\n", encoding="utf-8")
    try:
        read_sites_csv(path)
        csv_ok, csv_msg = True, ""
    except ExchangeError as exc:
        csv_ok, csv_msg = False, str(exc)
    value = float(text)
    outcomes = {"csv": csv_ok}
    for name, build in (
        ("site", lambda: Site(id="LK-09", name="x", elevation_m=120.0, supersaturation_percent=value)),
        ("settings", lambda: ProgramSettings(supersaturation_percent=value)),
        ("criteria", lambda: Criteria(supersaturation_percent=value)),
    ):
        try:
            build()
            outcomes[name] = True
        except Exception:  # noqa: BLE001 - pydantic's ValidationError, the science's ValueError
            outcomes[name] = False
    _value, app_msg = setting_problem("supersaturation_percent", text)
    outcomes["app"] = app_msg is None
    assert outcomes == dict.fromkeys(outcomes, accepted), (outcomes, csv_msg, app_msg)
    if not accepted:
        # one line naming the column as the file spells it and the accepted range, no internal name beyond it
        assert csv_msg.startswith("sites.csv, line 2, column supersaturation_percent: Supersaturation threshold")
        assert "100–300 %" in csv_msg and "\n" not in csv_msg
        assert "supersaturation_percent" not in app_msg
        if "e" not in text:  # the app's number entry refuses a power of ten before any range
            assert "from 100 to 300 %" in app_msg


def test_site_csv_takes_the_unit_its_column_names(tmp_path):
    from core.records.exchange import ExchangeError, read_sites_csv

    path = tmp_path / "sites.csv"
    path.write_text(
        'site_id,name,elevation_m,min_do_mg_l,supersaturation_percent\nLK-09,Test,120 m,"5,5 mg/L",130 %\n',
        encoding="utf-8",
    )
    site = read_sites_csv(path)[0]
    assert (site.elevation_m, site.min_do_mg_l, site.supersaturation_percent) == (120.0, 5.5, 130.0)
    path.write_text("site_id,name,elevation_m\nLK-09,Test,1200 ft\n", encoding="utf-8")
    with pytest.raises(ExchangeError) as info:
        read_sites_csv(path)
    msg = str(info.value)
    assert msg.startswith("sites.csv, line 2, column elevation_m: Elevation") and "within −430–6000 m" in msg, msg
