"""Between the app's forms and the store's records (core.models): the one place that knows both shapes."""
from __future__ import annotations

from dataclasses import asdict, fields
from datetime import datetime
from types import SimpleNamespace
from typing import Any

from mobile.app.forms import BottleForm, CalForm, StopForm, TripForm


def site_title(site: Any) -> str:
    return f"{site.id} {site.name}" if site is not None else ""


def make_site(code, name, elevation_m, water_class=None):
    return SimpleNamespace(id=code, name=name, elevation_m=elevation_m, water_class=water_class)


def site_info(site):
    if site is None:
        return {}
    return {"elevation_m": getattr(site, "elevation_m", None), "water_class": getattr(site, "water_class", None)}


def prefs_from_settings(settings, cls):
    d = dict(settings or {})
    return cls(**{f.name: d[f.name] for f in fields(cls) if f.name in d})


def settings_from_prefs(settings, prefs):
    return asdict(prefs)


def _dt(v):
    return datetime.fromisoformat(v) if isinstance(v, str) and v else None


def _iso(v):
    return v.isoformat() if v else None


def form_from_trip(model) -> TripForm:
    m = dict(model)
    def cal(d):
        d = dict(d); d["at"] = _dt(d.get("at")); return CalForm(**d)
    stops = []
    for s in m["stops"]:
        s = dict(s)
        s["arrived_at"] = _dt(s["arrived_at"])
        s["bottles"] = [BottleForm(**{**b, "collected_at": _dt(b["collected_at"]), "fixed_at": _dt(b["fixed_at"])}) for b in s["bottles"]]
        stops.append(StopForm(**s))
    return TripForm(id=m["id"], program=m["program"], crew=m["crew"], meter_id=m["meter_id"],
                    started_at=_dt(m["started_at"]), ended_at=_dt(m["ended_at"]),
                    pre_cal=cal(m["pre_cal"]), post_check=cal(m["post_check"]), stops=stops)


def trip_from_form(form: TripForm, previous, ctl):
    d = asdict(form)
    def fix(o):
        if isinstance(o, dict):
            return {k: fix(v) for k, v in o.items()}
        if isinstance(o, list):
            return [fix(v) for v in o]
        return _iso(o) if isinstance(o, datetime) else o
    d = fix(d)
    d["revision"] = (previous or {}).get("revision", 0)
    return d


def qc_flags_for_stop(ctl, stop):
    return []
