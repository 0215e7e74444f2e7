"""Property test of the save path: any sequence of edits keeps the store's invariants."""

from __future__ import annotations

from datetime import timedelta

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from core.records.models import measure
from core.store import DeviceStore
from core.store.atomic import content_hash
from tests.records.conftest import T0, FakeClock, make_stop, make_trip

edit = st.one_of(
    st.tuples(st.just("add"), st.sampled_from(["LK-01", "LK-03"]), st.floats(0, 30).map(lambda x: round(x, 1))),
    st.tuples(st.just("temp"), st.integers(0, 5), st.floats(0, 30).map(lambda x: round(x, 1))),
    st.tuples(st.just("notes"), st.integers(0, 5), st.text(max_size=20)),
    st.tuples(st.just("same"), st.integers(0, 5), st.none()),
)


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.lists(edit, min_size=1, max_size=6))
def test_any_edit_sequence_keeps_invariants(tmp_path_factory, edits):
    store = DeviceStore.open(tmp_path_factory.mktemp("prop"), device_id="dev-p", clock=FakeClock())
    trip = store.save_trip(make_trip(), "new")
    writes = 1
    for kind, a, b in edits:
        before = trip.revision
        if kind == "add":
            trip = store.save_stop(trip.id, make_stop(a, at=T0 + timedelta(minutes=len(trip.stops)), temp=str(b)))
        elif trip.stops:
            stop = trip.stops[a % len(trip.stops)]
            if kind == "temp":
                stop = stop.model_copy(update={"temp": measure("temp", str(b))})
            elif kind == "notes":
                stop = stop.model_copy(update={"notes": b})
            trip = store.save_stop(trip.id, stop)
        writes += trip.revision - before
        assert trip.revision - before in (0, 1)  # one write per change, none for no change
        assert store.load_trip(trip.id) == trip
        assert len(trip.audit) == trip.revision == writes
        summary = store.list_trips()[0]
        assert summary.content_hash == content_hash(store.trip_document(trip.id))
        assert summary.stop_count == len(trip.stops)
        for s in trip.stops:  # derived values always follow the inputs
            assert s.derived is not None and s.derived.temp_c == s.temp.value
