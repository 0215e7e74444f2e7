"""The archive's relational schema as versioned migrations (PostgreSQL), applied in order by
`sync.archive.migrate`; the applied version is kept in ``archive_schema``.

Tables (one row per thing in the trip documents; every trip's rows hang off ``trips`` with
``ON DELETE CASCADE``, so rewriting a trip is one DELETE and one set of inserts):

==================  ==============================================================================
``sites``           the program's sites (id, name, elevation, class, site criterion)
``settings``        the program settings (criteria, method), one row per program name
``trips``           one row per trip: revision, content hash (what makes loads incremental), crew,
                    times, season (year of ``started_at``), review state, the whole document (jsonb)
``stops``           every input as typed (text, entered value and unit) and normalised (value,
                    unit), and the derived values (DO saturation, % saturation, salinity, SC25 ...)
``bottles``         bottles collected at a stop
``results``         lab results on a bottle, with ``qualifier`` and ``status`` (reported,
                    superseded, invalid, pending)
``calibrations``    pre-trip calibration and post-trip check
``custody``         chain-of-custody entries of a bottle, when the trip records them
``flags``           QC flags of stops, calibrations and results (code, severity, message, action)
``review_events``   the office's review steps (who, when, action, comment, reasons)
``load_sources``    per store folder: how far its change feed was read, when every trip was compared
``site_season_stats`` per site and season: visits, visits with DO, minimum DO, visits below the
                    criterion; kept up to date by every load (not aggregated on each question)
==================  ==============================================================================

Views: ``stops_with_site`` (stops, their site and trip, flag codes and the worst severity),
``results_as_reported`` (current lab results with site and stop), ``stop_criterion`` (each visit
with the DO criterion it is judged against: the site's own minimum, else the program's warm- or
cold-water minimum), ``site_season_summary`` (per site and season: visits, minimum DO, visits below
the criterion; read from ``site_season_stats``).

A migration that adds rows derived from the documents clears ``trips.content_hash``, so the next
``archive load`` rewrites every trip's rows under the new schema.
"""

from __future__ import annotations

__all__ = ["MIGRATIONS", "LATEST", "STATS_SELECT"]

_V1 = """
CREATE TABLE archive_schema (
    version     integer PRIMARY KEY,
    description text NOT NULL,
    applied_at  timestamptz NOT NULL DEFAULT now()
);
CREATE TABLE sites (
    site_id                 text PRIMARY KEY,
    name                    text NOT NULL,
    elevation_m             double precision,
    latitude                double precision,
    longitude               double precision,
    water_class             text,
    min_do_mg_l             double precision,
    supersaturation_percent double precision,
    notes                   text NOT NULL DEFAULT '',
    content_hash            text NOT NULL
);
CREATE TABLE settings (
    program                    text PRIMARY KEY,
    method                     text,
    warm_min_mg_l              double precision NOT NULL,
    cold_min_mg_l              double precision NOT NULL,
    supersaturation_percent    double precision,
    hypoxic_mg_l               double precision,
    calibration_tolerance_mg_l double precision,
    document                   jsonb NOT NULL,
    content_hash               text NOT NULL
);
CREATE TABLE trips (
    trip_id       text PRIMARY KEY,
    revision      integer NOT NULL,
    content_hash  text,
    program       text NOT NULL DEFAULT '',
    crew          text[] NOT NULL DEFAULT '{}',
    meter_id      text NOT NULL DEFAULT '',
    device_id     text NOT NULL DEFAULT '',
    started_at    timestamptz NOT NULL,
    ended_at      timestamptz,
    season        integer NOT NULL,
    notes         text NOT NULL DEFAULT '',
    open_conflicts integer NOT NULL DEFAULT 0,
    updated_at    timestamptz,
    loaded_at     timestamptz NOT NULL DEFAULT now(),
    document      jsonb NOT NULL
);
CREATE TABLE stops (
    trip_id       text NOT NULL REFERENCES trips ON DELETE CASCADE,
    stop_id       text NOT NULL,
    position      integer NOT NULL,
    site_id       text NOT NULL,
    season        integer NOT NULL,
    arrived_at    timestamptz NOT NULL,
    closed_at     timestamptz,
    temp_text text, temp_entered_value double precision, temp_entered_unit text,
    temp_value double precision, temp_unit text,
    pressure_text text, pressure_entered_value double precision, pressure_entered_unit text,
    pressure_value double precision, pressure_unit text,
    conductivity_text text, conductivity_entered_value double precision, conductivity_entered_unit text,
    conductivity_value double precision, conductivity_unit text,
    do_text text, do_entered_value double precision, do_entered_unit text,
    do_value double precision, do_unit text,
    notes text NOT NULL DEFAULT '', weather text NOT NULL DEFAULT '', flow text NOT NULL DEFAULT '',
    do_sat_mg_l double precision,
    percent_saturation double precision,
    do_mg_l double precision,
    salinity double precision,
    salinity_source text,
    specific_conductance_us_cm double precision,
    pressure_hpa double precision,
    temp_c double precision,
    method text,
    core_version text,
    basis text,
    PRIMARY KEY (trip_id, stop_id)
);
CREATE TABLE bottles (
    trip_id       text NOT NULL REFERENCES trips ON DELETE CASCADE,
    stop_id       text NOT NULL,
    bottle_id     text NOT NULL,
    label         text NOT NULL,
    kind          text NOT NULL,
    collected_at  timestamptz NOT NULL,
    fixed_at      timestamptz,
    preservation  text NOT NULL DEFAULT '',
    notes         text NOT NULL DEFAULT '',
    PRIMARY KEY (trip_id, bottle_id)
);
CREATE TABLE results (
    trip_id       text NOT NULL REFERENCES trips ON DELETE CASCADE,
    stop_id       text NOT NULL,
    bottle_id     text NOT NULL,
    result_id     text NOT NULL,
    analyte       text NOT NULL,
    value         double precision,
    unit          text NOT NULL DEFAULT '',
    qualifier     text NOT NULL DEFAULT '',
    status        text NOT NULL,
    analysed_at   timestamptz,
    analyst       text NOT NULL DEFAULT '',
    method        text NOT NULL DEFAULT '',
    notes         text NOT NULL DEFAULT '',
    inputs        jsonb NOT NULL DEFAULT '{}',
    PRIMARY KEY (trip_id, result_id)
);
CREATE TABLE calibrations (
    trip_id         text NOT NULL REFERENCES trips ON DELETE CASCADE,
    calibration_id  text NOT NULL,
    kind            text NOT NULL,
    at              timestamptz NOT NULL,
    temp_text text, temp_value double precision, temp_unit text,
    pressure_text text, pressure_value double precision, pressure_unit text,
    reading_mg_l    double precision,
    target_mg_l     double precision,
    difference_mg_l double precision,
    tolerance_mg_l  double precision,
    accepted        boolean,
    method          text,
    notes           text NOT NULL DEFAULT '',
    PRIMARY KEY (trip_id, calibration_id)
);
CREATE TABLE flags (
    trip_id     text NOT NULL REFERENCES trips ON DELETE CASCADE,
    owner_kind  text NOT NULL,          -- stop | calibration | result
    owner_id    text NOT NULL,
    code        text NOT NULL,
    severity    text NOT NULL,
    message     text NOT NULL DEFAULT '',
    action      text NOT NULL DEFAULT '',
    field       text
);
CREATE INDEX flags_owner ON flags (trip_id, owner_id);
CREATE INDEX stops_site_season ON stops (site_id, season);
"""

_V2 = """
ALTER TABLE trips ADD COLUMN review_state text NOT NULL DEFAULT 'in progress';
CREATE TABLE review_events (
    trip_id   text NOT NULL REFERENCES trips ON DELETE CASCADE,
    event_id  text NOT NULL,
    action    text NOT NULL,
    at        timestamptz NOT NULL,
    by_name   text NOT NULL,
    comment   text NOT NULL DEFAULT '',
    reasons   text[] NOT NULL DEFAULT '{}',
    revision  integer,
    PRIMARY KEY (trip_id, event_id)
);
CREATE TABLE custody (
    trip_id    text NOT NULL REFERENCES trips ON DELETE CASCADE,
    bottle_id  text NOT NULL,
    seq        integer NOT NULL,
    at         timestamptz,
    action     text NOT NULL DEFAULT '',
    by_name    text NOT NULL DEFAULT '',
    to_name    text NOT NULL DEFAULT '',
    notes      text NOT NULL DEFAULT '',
    entry      jsonb NOT NULL,
    PRIMARY KEY (trip_id, bottle_id, seq)
);
UPDATE trips SET content_hash = NULL;   -- rows derived from the documents grew: reload every trip
"""

_V3 = """
CREATE INDEX trips_season ON trips (season);
CREATE VIEW stops_with_site AS
SELECT s.trip_id, s.stop_id, s.season, s.site_id, si.name AS site_name, si.water_class,
       t.program, t.crew, t.review_state, s.arrived_at,
       s.temp_value AS temp_c_entered, s.do_value, s.do_unit, s.do_mg_l, s.percent_saturation,
       s.do_sat_mg_l, s.specific_conductance_us_cm, s.pressure_hpa, s.salinity, s.notes,
       COALESCE(f.codes, '{}') AS flag_codes, f.worst_severity
FROM stops s
JOIN trips t USING (trip_id)
LEFT JOIN sites si ON si.site_id = s.site_id
LEFT JOIN LATERAL (
    SELECT array_agg(fl.code ORDER BY fl.code) AS codes,
           (array_agg(fl.severity ORDER BY CASE fl.severity WHEN 'stop-and-check' THEN 0
                                                          WHEN 'warning' THEN 1 ELSE 2 END))[1]
               AS worst_severity
    FROM flags fl WHERE fl.trip_id = s.trip_id AND fl.owner_kind = 'stop' AND fl.owner_id = s.stop_id
) f ON true;

CREATE VIEW results_as_reported AS
SELECT r.trip_id, s.season, s.site_id, si.name AS site_name, s.stop_id, s.arrived_at,
       b.label AS bottle_label, b.kind AS bottle_kind, r.result_id, r.analyte, r.value, r.unit,
       r.qualifier, r.analysed_at, r.analyst, r.method, t.review_state
FROM results r
JOIN bottles b ON b.trip_id = r.trip_id AND b.bottle_id = r.bottle_id
JOIN stops s ON s.trip_id = r.trip_id AND s.stop_id = r.stop_id
JOIN trips t ON t.trip_id = r.trip_id
LEFT JOIN sites si ON si.site_id = s.site_id
WHERE r.status = 'reported';

-- The criterion a visit is judged against: the site's own minimum DO, else the program's
-- warm- or cold-water minimum by the site's class (warm when the class is not set). `archive load`
-- always writes the settings row (the store's defaults when the program set none).
CREATE VIEW site_season_summary AS
WITH program AS (
    SELECT warm_min_mg_l, cold_min_mg_l FROM settings ORDER BY program LIMIT 1
), visits AS (
    SELECT s.site_id, s.season, s.do_mg_l,
           COALESCE(si.min_do_mg_l,
                    CASE WHEN si.water_class = 'cold' THEN p.cold_min_mg_l ELSE p.warm_min_mg_l END)
               AS criterion_mg_l
    FROM stops s
    LEFT JOIN sites si ON si.site_id = s.site_id
    LEFT JOIN program p ON true
)
SELECT v.site_id, si.name AS site_name, v.season,
       count(*) AS visits,
       count(v.do_mg_l) AS visits_with_do,
       min(v.do_mg_l) AS min_do_mg_l,
       count(*) FILTER (WHERE v.do_mg_l < v.criterion_mg_l) AS visits_below_criterion,
       min(v.criterion_mg_l) AS criterion_mg_l
FROM visits v
LEFT JOIN sites si ON si.site_id = v.site_id
GROUP BY v.site_id, si.name, v.season;
"""

# The season summary is kept in a table, not aggregated from every stop on each question: each
# load adds and subtracts the contributions of the trips it rewrites (sync.archive); the minimum
# is recomputed for a site and season only when a rewritten trip held it, and everything is
# recomputed when sites or settings change. STATS_SELECT is the one aggregate all of them use.
STATS_SELECT = """
SELECT site_id, season, count(*) AS visits, count(do_mg_l) AS visits_with_do, min(do_mg_l) AS min_do_mg_l,
       count(*) FILTER (WHERE do_mg_l < criterion_mg_l) AS visits_below_criterion,
       min(criterion_mg_l) AS criterion_mg_l
FROM stop_criterion WHERE {where} GROUP BY site_id, season
"""

_V4 = (
    """
CREATE VIEW stop_criterion AS
WITH program AS (
    SELECT warm_min_mg_l, cold_min_mg_l FROM settings ORDER BY program LIMIT 1
)
SELECT s.trip_id, s.stop_id, s.site_id, s.season, s.do_mg_l,
       COALESCE(si.min_do_mg_l,
                CASE WHEN si.water_class = 'cold' THEN p.cold_min_mg_l ELSE p.warm_min_mg_l END)
           AS criterion_mg_l
FROM stops s
LEFT JOIN sites si ON si.site_id = s.site_id
LEFT JOIN program p ON true;

CREATE TABLE site_season_stats (
    site_id                 text NOT NULL,
    season                  integer NOT NULL,
    visits                  integer NOT NULL,
    visits_with_do          integer NOT NULL,
    min_do_mg_l             double precision,
    visits_below_criterion  integer NOT NULL,
    criterion_mg_l          double precision,
    PRIMARY KEY (site_id, season)
);
INSERT INTO site_season_stats """
    + STATS_SELECT.format(where="true")
    + """;

DROP VIEW site_season_summary;
CREATE VIEW site_season_summary AS
SELECT st.site_id, si.name AS site_name, st.season, st.visits, st.visits_with_do, st.min_do_mg_l,
       st.visits_below_criterion, st.criterion_mg_l
FROM site_season_stats st
LEFT JOIN sites si ON si.site_id = st.site_id;
"""
)

# Per store loaded from: the mark in its change feed (DeviceStore.changes_since) the last load read
# up to, and when a load last compared every trip.
_V5 = """
CREATE TABLE load_sources (
    source      text PRIMARY KEY,
    log_inode   bigint NOT NULL,
    log_offset  bigint NOT NULL,
    full_at     timestamptz NOT NULL
);
"""

#: (version, description, SQL), applied in order, each in its own transaction.
MIGRATIONS: list[tuple[int, str, str]] = [
    (1, "trips, stops, bottles, results, calibrations, flags, sites, settings", _V1),
    (2, "review events, custody, trips.review_state", _V2),
    (3, "views: stops_with_site, results_as_reported, site_season_summary", _V3),
    (4, "site_season_stats kept by each load; site_season_summary reads it", _V4),
    (5, "load_sources: where each store's change feed was read up to", _V5),
]
LATEST = MIGRATIONS[-1][0]
