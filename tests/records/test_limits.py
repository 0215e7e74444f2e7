"""Limits per field and per list on documents from outside the device: an import breaking one is
refused in one line naming the field, nothing stored, never a RecursionError (issue 9)."""

from __future__ import annotations

import json

import pytest

from core.records.exchange import ExchangeError, import_trip_file
from core.records.limits import LIST_LIMITS, MAX_DEPTH, MAX_TEXT_CHARS, LimitError, check_document_limits, loads_limited
from tests.conftest import run_cli
from tests.records.conftest import make_stop, make_trip


def nested(levels: int) -> str:
    return '{"id": "x", "deep": ' + "[" * levels + "]" * levels + "}"


@pytest.mark.parametrize("levels", [1_000, 100_000])
def test_deep_nesting_is_a_limit_error_not_a_recursion_error(levels):
    with pytest.raises(LimitError) as info:
        loads_limited(nested(levels))
    assert f"more than {MAX_DEPTH} levels" in str(info.value)


def test_depth_just_inside_the_limit_passes():
    check_document_limits(json.loads(nested(MAX_DEPTH - 2)))


def test_limits_name_the_field_and_the_limit():
    doc = make_trip([make_stop()]).to_document()
    ok = dict(doc)
    check_document_limits(ok)
    with pytest.raises(LimitError, match=r"^crew lists 60,000 crew names; at most 100"):
        check_document_limits(dict(doc, crew=["R.O."] * 60_000))
    with pytest.raises(LimitError, match=r"^stops lists 12,000 stops; at most 1,000"):
        check_document_limits(dict(doc, stops=[doc["stops"][0]] * 12_000))
    with pytest.raises(LimitError, match=r"^blob holds 7,000,000 characters; at most 100,000"):
        check_document_limits(dict(doc, blob="x" * 7_000_000))
    with pytest.raises(LimitError, match=r"stops\[0\]\.notes holds"):
        check_document_limits(dict(doc, stops=[dict(doc["stops"][0], notes="n" * (MAX_TEXT_CHARS + 1))]))
    assert LIST_LIMITS["crew"] == 100


@pytest.mark.parametrize("case", ["deep", "crew", "stops", "blob"])
def test_trip_import_refuses_in_one_line_and_stores_nothing(store, tmp_path, case):
    doc = make_trip([make_stop()]).to_document()
    if case == "deep":
        text = json.dumps(doc)[:-1] + ', "deep": ' + "[" * 1000 + "]" * 1000 + "}"
    elif case == "crew":
        text = json.dumps(dict(doc, crew=[f"walker {i}" for i in range(60_000)]))
    elif case == "stops":
        text = json.dumps(dict(doc, stops=[doc["stops"][0]] * 12_000))
    else:
        text = json.dumps(dict(doc, unknown_field="x" * 7_000_000))
    path = tmp_path / f"{case}.json"
    path.write_text(text)
    with pytest.raises(ExchangeError) as info:
        import_trip_file(store, path)
    assert str(info.value).startswith(f"{case}.json: ") and "\n" not in str(info.value)
    assert store.list_trips() == []
    r = run_cli("trip", "import", str(path), data_dir=store.data_dir)
    assert r.returncode == 2 and "Traceback" not in r.stderr
    assert len(r.stderr.strip().splitlines()) == 1 and f"{case}.json" in r.stderr


def test_a_trip_file_over_the_size_limit_is_refused_without_reading_it_whole(store, tmp_path):
    from core.records.limits import MAX_DOCUMENT_BYTES

    path = tmp_path / "huge.json"
    with open(path, "wb") as fh:
        fh.write(b'{"notes": "')
        fh.write(b"x" * (MAX_DOCUMENT_BYTES + 10))
        fh.write(b'"}')
    with pytest.raises(ExchangeError, match=r"^huge\.json: larger than 8 MiB"):
        import_trip_file(store, path)
    assert store.list_trips() == []
