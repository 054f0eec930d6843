"""Vectorised fleet recompute: whole platforms at once, chunks of vehicles shared by workers.

The per-vehicle path (:func:`analytics.analysis.analyse`) stays the reference; this module gives
the same payload and advice for many vehicles at once:

1. **Read** — one query per table per chunk (readings joined to their current sessions,
   component checks, service events, and the input keys), each answered as one row of binary
   column arrays that numpy takes as they arrive (:mod:`analytics.column_read`).
2. **Drift** — every vehicle × corner × angle of the chunk as one NaN-padded stack (shape
   ``(series, readings)``, km and deg; :mod:`analytics.core.stacks`): Sen's slopes by
   :func:`~analytics.core.drift.theil_sen_stack`, the CUSUM step screen vectorised over the
   stack; the few series where the screen signals a step are fitted by the core's own
   :func:`~analytics.core.drift.fit_drift` (exactly the per-vehicle computation). Shrinkage
   toward the platform's pooled rate and the forecast crossings of the tolerance band (grid +
   bisection, the arithmetic of :func:`~analytics.core.drift.forecast_crossing`;
   :mod:`analytics.core.crossing_search`) are vectorised over all series.
3. **Wear** — ball-joint play lines and log-stiffness decay lines, stacked the same way; the
   stiffness criterion (cornering toe change of the outer rear wheel turning toe-out) is built
   once per platform corner (:mod:`analytics.core.stiffness_sign`) and evaluated over all
   vehicles' bands at once.
4. **Compliance** — each platform's corner files are parsed once, and the load-case comparison
   is computed once per distinct measured condition (:mod:`analytics.platform_cache`).
5. **Advice** — :func:`analytics.core.advice.advise` per vehicle (pure Python, cheap).
6. **Write** (:mod:`analytics.result_write`) — ``AnalysisResult`` rows copied into a temporary
   table and inserted with ``ON CONFLICT DO NOTHING RETURNING`` on the unique (vehicle, input
   key, model version): a rerun, or a concurrent run, writes once; advice and drift-rate rows
   with ``COPY`` only for the results this run inserted.

Units: odometer km, angles deg, play mm, stiffness N/mm, slopes deg/km (payload deg/10 000 km).
"""
from __future__ import annotations

import contextlib
import datetime as dt
import gc
import logging
import math
import time
from dataclasses import dataclass, field
from types import SimpleNamespace
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd
from django.db import connection, transaction
from django.utils import timezone

from analytics.column_read import read_columns, read_columns_many
from analytics.core import advice as adv
from analytics.core.advice import MODEL_VERSION
from analytics.core.condition import LinkCondition
from analytics.core.crossing_search import (
    LinspaceGrid,
    band_terms,
    bisect_first,
    block_bounds,
    centre_half,
    centre_half_of,
    crossings,
    scan_blocks,
)
from analytics.core.drift import (
    DRIFT_MODEL,
    FORECAST_GRID_POINTS,
    CrossingForecast,
    fit_drift,
    theil_sen_stack,
)
from analytics.core.load_cases import CORNERS
from analytics.core.stacks import (
    Z95,
    LineFits,
    decreasing_runs,
    line_fits,
    runs,
    stack,
    step_screen,
)
from analytics.core.wear import (
    BAND_SAMPLES,
    NEED_TWO_PLAY_KM,
    PLAY_MODEL,
    StiffnessCriterion,
    forecast_play,
)
from inspections.models import Platform, Vehicle
from inspections.models.catalogue import CORNER_AXLE, PARTS_BY_CODE

from . import analysis
from .analysis import ANGLES, ASSUMPTIONS, HORIZON_KM, REPEATABILITY, advice_json
from .models import (
    PooledRate,
)
from .platform_cache import PlatformCache, platform_cache
from .result_write import write_results

log = logging.getLogger(__name__)

__all__ = ["CHUNK_VEHICLES", "ChunkStats", "chunks", "fleet_recompute", "recompute_chunk"]

#: Vehicles per chunk: one Celery task; ≈ 0.1 GiB of frames at 100 readings per vehicle.
CHUNK_VEHICLES: int = 1000
EPOCH = dt.date(1970, 1, 1)
TOE_OUT_LABEL = StiffnessCriterion.toe_out(np.asarray).label


@dataclass
class ChunkStats:
    """What one chunk did and where its time went (seconds)."""

    vehicles: int = 0
    analysed: int = 0
    written: int = 0
    fallback_series: int = 0
    fallback_vehicles: int = 0
    seconds: dict = field(default_factory=dict)
    keys: dict = field(default_factory=dict)  # vehicle id → the input key it was analysed for


# --------------------------------------------------------------------------- reading


#: Planner settings of the chunk reads, for their own transaction only (``set_config(…, true)``,
#: as ``SET LOCAL``). A chunk reads a few per cent of the readings, by vehicle. With the default
#: ``random_page_cost`` (4, a spinning-disk cost) the planner read every chunk's readings with a
#: parallel sequential scan of the whole table in three processes (≈ 0.5 CPU-s a chunk, against
#: ≈ 0.1 s through the session index; EXPLAIN ANALYZE on the 10 000-vehicle fleet), and parallel
#: query workers only take cores from the other workers' chunks. 1.1: tables cached in memory or
#: on SSD, the common setting for such servers (common practice, no source).
READ_SETTINGS = (("max_parallel_workers_per_gather", "0"), ("random_page_cost", "1.1"))


READINGS_SQL = """
SELECT s.vehicle_id, r.session_id, s.measured_at, s.odometer_km, s.kind, r.corner,
       r.toe_deg, r.camber_deg, r.caster_deg
FROM inspections_wheelreading r JOIN inspections_alignmentsession s ON s.id = r.session_id
WHERE s.vehicle_id = ANY(%s)
  AND NOT EXISTS (SELECT 1 FROM inspections_alignmentsession n WHERE n.supersedes_id = s.id)
ORDER BY s.vehicle_id, s.measured_at, r.session_id, r.corner"""
CHECKS_SQL = """
SELECT c.vehicle_id, c.id, c.checked_at, c.odometer_km, c.corner, c.part, c.play_mm,
       c.deflection_mm, c.deflection_force_n, c.findings, c.verdict, c.defect_category
FROM inspections_componentcheck c
WHERE c.vehicle_id = ANY(%s)
  AND NOT EXISTS (SELECT 1 FROM inspections_componentcheck n WHERE n.supersedes_id = c.id)
ORDER BY c.vehicle_id, c.checked_at, c.id"""
EVENTS_SQL = """
SELECT e.vehicle_id, e.performed_at, e.odometer_km, e.kind, e.corner, e.part, e.reason
FROM inspections_serviceevent e WHERE e.vehicle_id = ANY(%s)
ORDER BY e.vehicle_id, e.performed_at, e.id"""
KEYS_SQL = """
SELECT v.id AS vehicle_id,
  COALESCE((SELECT max(id) FROM inspections_alignmentsession s WHERE s.vehicle_id = v.id), 0) AS s,
  COALESCE((SELECT max(id) FROM inspections_componentcheck c WHERE c.vehicle_id = v.id), 0) AS c,
  COALESCE((SELECT max(id) FROM inspections_serviceevent e WHERE e.vehicle_id = v.id), 0) AS e
FROM inspections_vehicle v WHERE v.id = ANY(%s)"""
#: A chunk's own look-ups, each with one array parameter (``= ANY(%s)``) instead of the ORM's
#: ``IN (…)`` of a thousand placeholders (≈ 10 ms of worker CPU each to build and adapt).
VEHICLES_SQL = """
SELECT v.id, v.plate, v.vin, w.time_zone
FROM inspections_vehicle v JOIN inspections_workshop w ON w.id = v.workshop_id
WHERE v.id = ANY(%s) AND v.platform_id = %s"""
DONE_SQL = """
SELECT r.vehicle_id, r.input_key FROM analytics_analysisresult r
WHERE r.vehicle_id = ANY(%s) AND r.model_version = %s AND r.input_key = ANY(%s)"""
OWNERS_SQL = "SELECT v.id, v.owner_id FROM inspections_vehicle v WHERE v.id = ANY(%s)"
#: The columns of each query, by kind (:mod:`analytics.column_read`).
READINGS_COLUMNS = {"vehicle_id": "int", "session_id": "int", "measured_at": "time",
                    "odometer_km": "int", "kind": "code", "corner": "code", "toe_deg": "float",
                    "camber_deg": "float", "caster_deg": "float"}
CHECKS_COLUMNS = {"vehicle_id": "int", "id": "int", "checked_at": "time", "odometer_km": "int",
                  "corner": "code", "part": "code", "play_mm": "float", "deflection_mm": "float",
                  "deflection_force_n": "float", "findings": "json", "verdict": "code",
                  "defect_category": "code"}
EVENTS_COLUMNS = {"vehicle_id": "int", "performed_at": "time", "odometer_km": "int",
                  "kind": "code", "corner": "code", "part": "code", "reason": "text"}
KEYS_COLUMNS = {"vehicle_id": "int", "s": "int", "c": "int", "e": "int"}


@dataclass
class ChunkFrames:
    """The current rows of some vehicles: readings (of current sessions), component checks and
    service events, as read by ``READINGS_SQL``/``CHECKS_SQL``/``EVENTS_SQL``, each with ``t``
    (int64 ns UTC of its time column)."""

    readings: pd.DataFrame
    checks: pd.DataFrame
    events: pd.DataFrame

    def of(self, ids) -> ChunkFrames:
        """The rows of vehicles ``ids`` only: these frames themselves when every row is theirs
        (the usual case, a chunk analysing all it read), else copies."""
        keep = pd.Index(ids)
        frames = (self.readings, self.checks, self.events)
        masks = [f["vehicle_id"].isin(keep).to_numpy() for f in frames]
        if all(m.all() for m in masks):
            return self
        return ChunkFrames(*(f[m].reset_index(drop=True) for f, m in zip(frames, masks, strict=True)))


#: The tables a chunk reads: (query, columns, time column).
READINGS = (READINGS_SQL, READINGS_COLUMNS, "measured_at")
CHECKS = (CHECKS_SQL, CHECKS_COLUMNS, "checked_at")
EVENTS = (EVENTS_SQL, EVENTS_COLUMNS, "performed_at")


def _read(ids: list[int], tables) -> list[pd.DataFrame]:
    """The rows of each of ``tables`` for vehicles ``ids`` as column arrays, one round trip each
    in one transaction planned with :data:`READ_SETTINGS` (:func:`read_columns_many`), the time
    column named ``t`` (int64 ns UTC)."""
    frames = read_columns_many([(sql, [ids], columns, ("vehicle_id", time_column))
                                for sql, columns, time_column in tables], settings=READ_SETTINGS)
    return [f.rename(columns={time_column: "t"})
            for f, (_sql, _columns, time_column) in zip(frames, tables, strict=True)]


def _fetch(sql: str, params: list) -> list[tuple]:
    """All rows of one query (Django's connection, so inside the caller's transaction)."""
    with connection.cursor() as cur:
        cur.execute(sql, params)
        return cur.fetchall()


def read_frames(ids: list[int]) -> ChunkFrames:
    """The readings, checks and events of vehicles ``ids`` (see :class:`ChunkFrames`)."""
    return ChunkFrames(*_read(ids, (READINGS, CHECKS, EVENTS)))


def read_readings(ids: list[int]) -> pd.DataFrame:
    """The readings frame of :func:`read_frames` alone."""
    return _read(ids, (READINGS,))[0]


def _local_day(ns: np.ndarray, zone_of_row: np.ndarray, zones: list[str]) -> np.ndarray:
    """int64 ns (UTC) → local calendar day number (days since 1970-01-01) in each row's zone
    (``zones[zone_of_row[i]]``, IANA names)."""
    out = np.empty(ns.size, dtype=np.int64)
    for z, tz in enumerate(zones):
        m = zone_of_row == z
        if not m.any():
            continue
        local = pd.DatetimeIndex(ns[m]).tz_localize("UTC").tz_convert(tz).tz_localize(None)
        out[m] = local.to_numpy().astype("datetime64[D]").astype(np.int64)
    return out


def _day(n: int) -> dt.date:
    return EPOCH + dt.timedelta(days=int(n))


def _days_and_rates(vids, today_of, kmpd) -> tuple[np.ndarray, np.ndarray]:
    """Each of ``vids``' local today as a day number and its daily-distance rate (km/day, NaN for
    none), shape ``(len(vids),)`` each: the ``today``/``km_per_day`` of :func:`_forecasts`."""
    today = np.array([(today_of[v] - EPOCH).days for v in vids], dtype=float)
    rate = np.array([np.nan if kmpd.get(v) is None else kmpd[v] for v in vids], dtype=float)
    return today, rate


def input_keys(vehicle_ids: list[int], platform_stamp: int) -> dict[int, str]:
    """The :func:`analytics.inputs.input_key` of many vehicles in one query."""
    k = read_columns(KEYS_SQL, [vehicle_ids], KEYS_COLUMNS)
    return {int(v): f"s{s}.c{c}.e{e}.p{platform_stamp}"
            for v, s, c, e in k[["vehicle_id", "s", "c", "e"]].itertuples(index=False)}


def _platform_stamp(platform_id: int) -> int:
    from django.db.models import Max

    p = PooledRate.objects.filter(platform_id=platform_id).aggregate(m=Max("computed_at"))["m"]
    return int(p.timestamp()) if p else 0


NO_RATE_NOTES = ("no usable daily-distance rate: dates come only from a fit over time",)


def _forecasts(early, likely, late, side, *, current_km, today, km_per_day, model,
               side_word=None, notes=None, time_days=None) -> list[tuple[CrossingForecast, dict]]:
    """The :class:`CrossingForecast` of each row as :func:`~analytics.core.drift.forecast_drift`
    builds it from given crossings, and its JSON (``analysis._forecast_json``), for many rows at
    once: the same values by the same arithmetic (dates as day numbers, converted once).

    Arrays ``(m,)``: ``early``/``likely``/``late`` crossing km (NaN: none); ``side`` (upper limit
    first; unused with ``side_word``); ``current_km``; ``today``: local day numbers (days since
    1970-01-01); ``km_per_day`` (NaN: none). ``time_days``: ``(m, 3)`` day numbers of the same
    crossings from the fit over time (NaN: none), or None.
    """
    current_km = np.asarray(current_km, dtype=float)
    m = current_km.size
    kms = np.stack([np.asarray(early, float), np.asarray(likely, float),
                    np.asarray(late, float)], axis=1)
    finite = np.isfinite(kms)
    rate = np.asarray(km_per_day, dtype=float)
    rate_ok = rate > 0
    with np.errstate(invalid="ignore", divide="ignore"):
        days = (kms - current_km[:, None]) / rate[:, None]  # as the core's _km_to_date
        has = finite & rate_ok[:, None] & ~(days > 365.25 * 200)
        day = np.asarray(today, dtype=float)[:, None] + np.floor(np.maximum(days, 0.0))
    e_ok = finite[:, 0]
    status = np.where(finite[:, 1] & (kms[:, 1] == current_km), "out_now",
                      np.where(e_ok, "crossing", "not_within_horizon"))
    if time_days is not None:
        td = np.asarray(time_days, dtype=float)
        t_ok = np.isfinite(td)
        day = np.where(has & t_ok, np.minimum(day, td), np.where(has, day, td))
        has = has | t_ok
        status = np.where((status == "not_within_horizon") & has[:, 0], "crossing", status)
    dates = np.where(has, day, 0.0).astype(np.int64).astype("datetime64[D]")
    d_obj, d_iso = dates.astype(object).tolist(), dates.astype(str).tolist()
    has_l, fin_l, km_l = has.tolist(), finite.tolist(), kms.tolist()
    status_l, rate_l = status.tolist(), rate_ok.tolist()
    side_l = np.asarray(side, dtype=bool).tolist() if side_word is None else None
    horizon_l = (current_km + HORIZON_KM).tolist()
    out = []
    for j in range(m):
        k = [km_l[j][c] if fin_l[j][c] else None for c in range(3)]
        d = [d_obj[j][c] if has_l[j][c] else None for c in range(3)]
        iso = [d_iso[j][c] if has_l[j][c] else None for c in range(3)]
        word = side_word if side_l is None else (
            None if k[0] is None else ("upper" if side_l[j] else "lower"))
        nts = notes if notes is not None else (() if rate_l[j] else NO_RATE_NOTES)
        fc = CrossingForecast(status=status_l[j], side=word, early_km=k[0], likely_km=k[1],
                              late_km=k[2], early_date=d[0], likely_date=d[1], late_date=d[2],
                              horizon_km=horizon_l[j], model=model, notes=nts)
        out.append((fc, {"status": status_l[j], "side": word, "early_km": k[0],
                         "likely_km": k[1], "late_km": k[2], "early_date": iso[0],
                         "likely_date": iso[1], "late_date": iso[2], "model": model,
                         "notes": list(nts)}))
    return out


# --------------------------------------------------------------------------- the chunk


def _conditions(latest: list[tuple], new) -> tuple:
    """Link conditions of one corner from its latest check per part (as ``_corner_models``).

    ``latest``: ``(part, play_mm, deflection_mm, deflection_force_n, findings)`` in check order.
    """
    conds: dict[str, LinkCondition] = {}
    for code, play_mm, deflection_mm, force_n, c_findings in latest:
        part = PARTS_BY_CODE.get(code)
        if part is None:
            continue
        findings = [f for f in c_findings if f != "none"]
        for link in part.links:
            if link not in new.link_names:
                continue
            prev = conds.get(link, LinkCondition())
            defl = analysis._f(deflection_mm)
            if part.kind == "bush" and defl and deflection_mm > 0:
                prev = LinkCondition(test_force_N=float(force_n), deflection_mm=float(deflection_mm),
                                     ball_joint_play_mm=prev.ball_joint_play_mm)
            elif part.kind == "bush" and findings:
                prev = LinkCondition(finding=findings[0], ball_joint_play_mm=prev.ball_joint_play_mm)
            if part.kind == "ball_joint" and analysis._f(play_mm) is not None:
                prev = LinkCondition(prev.test_force_N, prev.deflection_mm, prev.finding,
                                     float(play_mm))
            conds[link] = prev
    return tuple((k, (v.test_force_N, v.deflection_mm, v.finding, v.ball_joint_play_mm))
                 for k, v in conds.items())


def _flags_between(group_keys, times, adjust_group, adjust_times) -> np.ndarray:
    """For each reading (sorted by group, then time): an adjustment of its group in
    (previous reading's time, this reading's time]. Keys are (group, dense time rank)."""
    if not len(times):
        return np.zeros(0, dtype=bool)
    all_t = np.concatenate([times, adjust_times])
    uniq, rank = np.unique(all_t, return_inverse=True)
    rbits = max(int(uniq.size).bit_length(), 1)
    gr = np.unique(np.concatenate([group_keys, adjust_group]), return_inverse=True)[1]
    gk = gr[:len(group_keys)].astype(np.int64) << rbits
    ak = np.sort((gr[len(group_keys):].astype(np.int64) << rbits) + rank[len(times):])
    rk = gk + rank[:len(times)]
    upto = np.searchsorted(ak, rk, side="right")
    prev = np.roll(upto, 1)
    flags = (upto - prev) > 0
    first = np.r_[True, group_keys[1:] != group_keys[:-1]]
    flags[first] = False
    return flags


def _last_of_groups(frame: pd.DataFrame, by: tuple[str, ...] = ("vehicle_id", "corner", "part")
                    ) -> pd.DataFrame:
    """Each group's last row in (vehicle, time) order, in that order: what
    ``frame.sort_values(["vehicle_id", "t"], kind="stable").groupby(list(by)).tail(1)`` gives."""
    if not len(frame):
        return frame
    order = np.lexsort((frame["t"].to_numpy(), frame["vehicle_id"].to_numpy()))
    key = np.zeros(len(frame), dtype=np.int64)
    for col in by:
        codes, uniques = pd.factorize(frame[col].to_numpy())
        key = key * (len(uniques) + 1) + codes
    key = key[order]
    _, first_from_end = np.unique(key[::-1], return_index=True)
    return frame.take(order[np.sort(key.size - 1 - first_from_end)])


def _drift_stacks(found: pd.DataFrame, adj: pd.DataFrame, day0: dict | None = None,
                  reuse: dict | None = None):
    """Current-segment stacks of every (vehicle, corner) of as-found readings.

    ``found``: as-found readings (vehicle_id, corner, t, odometer_km, toe_deg, camber_deg, day);
    ``adj``: (vehicle_id, t) of adjustments. Returns a dict with the group keys
    (``vehicle_id·4 + corner index``), the rows per group, the fits and step-screen alarms per
    angle, each group's segment start and whether its odometer goes backwards. With ``day0``
    (vehicle → today's local day number) also the fits over time (days before today ≤ 0).

    ``reuse``: an earlier result (the platform pooling's, over the same readings): its segments,
    fits and alarms are taken as they are when its inputs — the sorted readings' groups, times,
    odometers and angles, and the adjustment flags — equal these, element for element (the
    pooling segments at as-adjusted sessions only, the analysis also at alignment-adjusted
    service events; recorded together, as they usually are, they flag the same readings).
    """
    # groups are sorted runs of vc = vehicle·4 + corner index (CORNERS are in text order, so
    # this is the stable sort by vehicle, corner, time); per-group sums and counts in numpy
    vc = found["vehicle_id"].to_numpy() * 4 + found["corner"].map(
        {c: i for i, c in enumerate(CORNERS)}).to_numpy()
    order = np.lexsort((found["t"].to_numpy(), vc))
    found = found.take(order)
    vc = vc[order]
    # an adjustment belongs to every corner of its vehicle: compare on the vehicle
    flags = _flags_between(found["vehicle_id"].to_numpy(), found["t"].to_numpy(),
                           adj["vehicle_id"].to_numpy(), adj["t"].to_numpy())
    first, gid, starts, sizes = runs(vc)
    flags[first] = False
    inputs = (vc, found["t"].to_numpy(), found["odometer_km"].to_numpy(),
              *(found[f"{angle}_deg"].to_numpy() for angle in ANGLES), flags)
    if reuse is not None and len(reuse["inputs"]) == len(inputs) and all(
            np.array_equal(x, y) for x, y in zip(reuse["inputs"], inputs, strict=True)):
        base = reuse["base"]
    else:
        base = _segment_fits(found, vc, flags, gid, starts, sizes)
    b = SimpleNamespace(**base)
    found = found.assign(vc=vc, flag=flags, seg=b.seg, idx=b.idx, last=b.last,
                         ntot=b.ntot)[b.keep]
    out = dict(keys=b.keys, found=found, fits=b.fits, alarms=b.alarms,
               seg=dict(zip(b.keys.tolist(), b.seg_start.tolist(), strict=True)),
               x_dec=b.x_dec, day_fits={}, inputs=inputs, base=base)
    if day0 is not None and b.keys.size:
        cur = found[b.now]
        d0 = cur["vehicle_id"].map(day0).to_numpy()
        XD = stack(b.g, b.pos, (cur["day"].to_numpy() - d0).astype(float), b.keys.size, b.W)
        for angle in ANGLES:
            out["day_fits"][angle] = line_fits(XD, b.Y[angle], np.full(b.keys.size,
                                                                        REPEATABILITY[angle]))
    return out


def _segment_fits(found: pd.DataFrame, vc, flags, gid, starts, sizes) -> dict:
    """The segments, stacks (km and each angle), fits and step-screen alarms of
    :func:`_drift_stacks` (``found`` sorted into groups ``vc`` with adjustment ``flags``)."""
    idx = np.arange(vc.size) - starts[gid]
    cs = np.cumsum(flags)
    seg = cs - cs[starts][gid]
    last = seg[starts + sizes - 1][gid]
    ntot = sizes[gid]
    keep = ntot >= 2
    x_dec = decreasing_runs(vc[keep], found["odometer_km"].to_numpy()[keep])
    now = (seg == last)[keep]
    base = dict(idx=idx, seg=seg, last=last, ntot=ntot, keep=keep, now=now, x_dec=x_dec,
                keys=np.zeros(0, dtype=np.int64), seg_start=np.zeros(0, dtype=np.int64),
                fits={}, alarms={}, g=None, pos=None, W=1, Y={})
    cvc, cidx = vc[keep][now], idx[keep][now]
    if not cvc.size:
        return base
    cur = found[keep][now]
    _, g, cstarts, _ = runs(cvc)
    keys = cvc[cstarts]
    seg_start = cidx[cstarts]  # a group's index grows with time: its first is its minimum
    pos = cidx - seg_start[g]
    W = int(pos.max()) + 1
    X = stack(g, pos, cur["odometer_km"].to_numpy(float), len(keys), W)
    fits, alarms, Y = {}, {}, {}
    for angle in ANGLES:
        Y[angle] = stack(g, pos, cur[f"{angle}_deg"].to_numpy(float), len(keys), W)
        msd = np.full(len(keys), REPEATABILITY[angle])
        fits[angle] = f = line_fits(X, Y[angle], msd)
        alarms[angle] = step_screen(X, Y[angle], f.slope, msd) & f.ok
    base.update(keys=keys, seg_start=seg_start, fits=fits, alarms=alarms, g=g, pos=pos, W=W, Y=Y)
    return base


def analyse_chunk(platform_id: int, vehicle_ids: list[int], *, only: set[int] | None = None,
                  stats: ChunkStats | None = None, frames: ChunkFrames | None = None,
                  drift_reuse: dict | None = None) -> dict[int, tuple[dict, list]]:
    """Payload and advice of each vehicle of one platform chunk: ``{vehicle_id: (payload, advice)}``.

    ``only``: analyse just these vehicles (others are skipped); ``frames``: their rows already
    read (:func:`read_frames` of a superset; when they are exactly these vehicles' rows the
    frames are used as they are and gain working columns), else they are read here;
    ``drift_reuse``: the pooling's drift stacks of the same readings (see :func:`_drift_stacks`).
    Nothing is written.
    """
    st = stats or ChunkStats()
    T = st.seconds
    t0 = time.perf_counter()
    cache = platform_cache(platform_id)
    platform = cache.platform
    ids = sorted(set(vehicle_ids) if only is None else set(vehicle_ids) & only)
    if not ids:
        return {}
    # vehicle id → (label for the advice, workshop time zone)
    vehicles = {pk: (f"{plate} ({vin})", tz) for pk, plate, vin, tz in _fetch(VEHICLES_SQL,
                                                                             [ids, platform_id])}
    ids = [i for i in ids if i in vehicles]
    got = read_frames(ids) if frames is None else frames.of(ids)
    rd, ck, ev = got.readings, got.checks, got.events
    T["read"] = T.get("read", 0) + time.perf_counter() - t0
    t1 = time.perf_counter()

    tz_of = {vid: vehicles[vid][1] for vid in ids}
    now = timezone.now()
    today_of = {vid: timezone.localtime(now, ZoneInfo(tz)).date() for vid, tz in tz_of.items()}
    zones = sorted(set(tz_of.values()))
    zone_of_vehicle = np.array([zones.index(tz_of[v]) for v in ids], dtype=np.int64)
    ids_arr = np.array(ids, dtype=np.int64)  # sorted
    for frame in (rd, ck, ev):
        zone_of_row = zone_of_vehicle[np.searchsorted(ids_arr, frame["vehicle_id"].to_numpy())]
        frame["day"] = _local_day(frame["t"].to_numpy(), zone_of_row, zones)
    for col in ("corner", "part", "reason"):
        ev[col] = ev[col].fillna("")
    ck["defect_category"] = ck["defect_category"].fillna("")

    # ---- per-vehicle scalars: odometer now, km per day, last marks
    G = len(ids)
    top, seen = np.zeros(G), np.zeros(G, dtype=bool)
    for frame in (rd, ck, ev):
        if len(frame):
            at = np.searchsorted(ids_arr, frame["vehicle_id"].to_numpy())
            np.maximum.at(top, at, frame["odometer_km"].to_numpy(float))
            seen[at] = True
    odo = {ids[i]: float(top[i]) for i in np.flatnonzero(seen)}
    # one row per session: a session's readings are adjacent (sorted by vehicle, time, session)
    sid = rd["session_id"].to_numpy()
    sess = rd[np.r_[True, sid[1:] != sid[:-1]]] if len(rd) else rd
    kmpd: dict[int, float | None] = {}
    bad: set[int] = set()  # vehicles sent to the per-vehicle path
    if len(sess):
        g = np.searchsorted(ids_arr, sess["vehicle_id"].to_numpy())
        _, gid, starts, sizes = runs(g)
        pos = np.arange(g.size) - starts[gid]
        cnt = np.zeros(G, dtype=np.int64)
        cnt[g[starts]] = sizes
        W = int(sizes.max())
        day = sess["day"].to_numpy()
        odo_km = sess["odometer_km"].to_numpy(float)
        today_day = np.array([(today_of[v] - EPOCH).days for v in ids])
        D = stack(g, pos, (day - today_day[g]).astype(float), G, W)
        ts = theil_sen_stack(D, stack(g, pos, odo_km, G, W))
        # the core refuses an odometer going backwards in time or one distinct day
        order = np.lexsort((day, g))  # the stable sort by vehicle, day
        back = decreasing_runs(g[order], odo_km[order])
        span = int(day.max() - day.min()) + 1
        nd = np.bincount(np.unique(g * span + (day - day.min())) // span, minlength=G)
        for gi, vid in enumerate(ids):
            if cnt[gi] < 2:
                kmpd[vid] = None
                continue
            if back.get(gi, False) or nd[gi] < 2:
                bad.add(vid)
                continue
            kmpd[vid] = float(ts.slope[gi]) if ts.slope[gi] > 0 else None
    T["prepare"] = T.get("prepare", 0) + time.perf_counter() - t1
    t2 = time.perf_counter()

    # ---- drift: vehicle × corner × angle stacks of the current segment
    drift: dict[int, dict] = {v: {} for v in ids}
    drift_fc: dict[int, list] = {v: [] for v in ids}
    steps_of: dict[int, list] = {v: [] for v in ids}
    kind = rd["kind"].to_numpy()
    found = rd[kind == "as_found"]
    adj_s = rd.loc[kind == "as_adjusted", ["vehicle_id", "t"]].drop_duplicates()
    adj_e = ev.loc[ev["kind"].to_numpy() == "alignment_adjusted", ["vehicle_id", "t"]]
    adj = pd.concat([adj_s, adj_e])
    if len(found):
        ds = _drift_stacks(found, adj, {v: (today_of[v] - EPOCH).days for v in ids},
                           reuse=drift_reuse)
        keys, found, fits, alarms = ds["keys"], ds["found"], ds["fits"], ds["alarms"]
        seg_of, x_dec = ds["seg"], ds["x_dec"]
        # series entries; shrink + forecast collected for one vectorised pass
        pend = []  # (vid, corner, angle, slope, se, xref, yref, rsd, n, sampling variance)
        fb_rows = {k: None for k in keys}
        # per angle, the fits as Python lists (one conversion, not one per element)
        col = {}
        for angle in ANGLES if len(keys) else ():
            f, fd = fits[angle], ds["day_fits"][angle]
            col[angle] = SimpleNamespace(
                alarm=alarms[angle].tolist(), n=f.n.tolist(), ok=f.ok.tolist(),
                slope=f.slope.tolist(), se=f.slope_se.tolist(), low=f.slope_low.tolist(),
                high=f.slope_high.tolist(), xref=f.x_ref.tolist(), yref=f.y_ref.tolist(),
                rsd=f.residual_sd.tolist(), sxx=f.sxx.tolist(), d_ok=fd.ok.tolist(),
                d=list(zip(fd.slope.tolist(), fd.slope_se.tolist(), fd.x_ref.tolist(),
                           fd.y_ref.tolist(), fd.residual_sd.tolist(), fd.n.tolist(),
                           strict=True)))
        spec_of = {(c, a): _spec_json(cache, c, a) for c in CORNERS for a in ANGLES}
        for gi, k in enumerate(keys.tolist()):
            vid, corner = k // 4, CORNERS[k % 4]
            if vid in bad:
                continue
            if x_dec.get(k, False):
                bad.add(vid)
                continue
            for angle in ANGLES:
                c = col[angle]
                key = f"{corner}.{angle}"
                if c.alarm[gi]:
                    st.fallback_series += 1
                    if fb_rows[k] is None:
                        fb_rows[k] = found[found["vc"] == k]
                    rows = fb_rows[k]
                    res = _fallback_series(rows, adj, vid, corner, angle, today_of[vid])
                    drift[vid][key], trend, s = res
                    if spec_of[(corner, angle)] is not None:
                        drift[vid][key]["spec"] = spec_of[(corner, angle)]
                    steps_of[vid].extend(s)
                    if trend is not None:
                        pend.append((vid, corner, angle, *trend))
                    continue
                entry = {"n_used": c.n[gi], "segment_start": seg_of[k], "steps": [],
                         "slope_deg_per_10k": None}
                spec = spec_of[(corner, angle)]
                if spec is not None:
                    entry["spec"] = spec
                drift[vid][key] = entry
                if not c.ok[gi]:
                    continue
                entry["slope_deg_per_10k"] = c.slope[gi] * 1e4
                entry["slope_se_deg_per_10k"] = c.se[gi] * 1e4
                entry["slope_ci_deg_per_10k"] = [c.low[gi] * 1e4, c.high[gi] * 1e4]
                # the sampling variance as the core works it out, in Python floats (x ** 2 is
                # C's pow, which differs from x·x in the last bit now and then)
                se, rsd, sxx = c.se[gi], c.rsd[gi], c.sxx[gi]
                var = max(se ** 2, rsd ** 2 / sxx) if sxx > 0 else math.inf
                pend.append((vid, corner, angle, c.slope[gi], se, c.xref[gi], c.yref[gi], rsd,
                             c.n[gi], var if var > 0 else math.inf,
                             c.d[gi] if c.d_ok[gi] else None))
        _shrink_and_forecast(pend, cache, drift, drift_fc, odo, today_of, kmpd)
    T["drift"] = T.get("drift", 0) + time.perf_counter() - t2
    t3 = time.perf_counter()

    # ---- wear
    wear, wear_fc = _wear_chunk(ids, ck, ev, cache, odo, today_of, kmpd, st)
    T["wear"] = T.get("wear", 0) + time.perf_counter() - t3
    t4 = time.perf_counter()

    # ---- corner conditions, compliance (cached per condition), findings
    latest = _last_of_groups(ck)
    comp: dict[int, tuple] = {}
    by_pos: dict[int, dict[str, list]] = {}
    for rec in zip(latest["vehicle_id"].tolist(), latest["corner"].tolist(), latest["part"].tolist(),
                   latest["play_mm"].tolist(), latest["deflection_mm"].tolist(),
                   latest["deflection_force_n"].tolist(), latest["findings"].tolist(), strict=True):
        by_pos.setdefault(rec[0], {}).setdefault(rec[1], []).append(rec[2:])
    conds_of = {vid: {pos: _conditions(grp.get(pos, []), new) for pos, new in cache.new.items()}
                for vid, grp in by_pos.items()}
    for pos in cache.new:
        cache.prepare_compliance(pos, [c[pos] for c in conds_of.values()])
    for vid in by_pos:
        out, verdicts, used = {}, [], {}
        for pos in cache.new:
            o, vs, u = cache.compliance(pos, conds_of[vid][pos])
            out[pos], used[pos] = o, u
            verdicts.extend(vs)
        comp[vid] = (out, verdicts, used)
    empty = None
    findings = _findings_chunk(latest, ev)
    T["compliance"] = T.get("compliance", 0) + time.perf_counter() - t4
    t5 = time.perf_counter()

    # ---- advice per vehicle
    p = platform
    a_int = analysis._interval(p.alignment_interval_km, p.alignment_interval_months,
                               p.sources or {}, "alignment_interval_km", "alignment_interval_months")
    s_int = analysis._interval(p.suspension_interval_km, p.suspension_interval_months,
                               p.sources or {}, "suspension_interval_km", "suspension_interval_months")
    def last_marks(frame: pd.DataFrame) -> dict:
        if not len(frame):
            return {}
        t = _last_of_groups(frame, by=("vehicle_id",))
        return {v: adv.ServiceMark(_day(d), float(o)) for v, d, o in zip(
            t["vehicle_id"].tolist(), t["day"].tolist(), t["odometer_km"].tolist(), strict=True)}

    last_s, last_c = last_marks(sess), last_marks(ck)
    results: dict[int, tuple[dict, list]] = {}
    for vid in ids:
        if vid in bad:
            continue
        today = today_of[vid]
        if vid in comp:
            c_out, c_verdicts, c_used = comp[vid]
        else:
            if empty is None:
                empty = {pos: cache.compliance(pos, ()) for pos in cache.new}
            c_out = {pos: e[0] for pos, e in empty.items()}
            c_verdicts = [x for e in empty.values() for x in e[1]]
            c_used = {pos: e[2] for pos, e in empty.items()}
        state = adv.VehicleState(
            vehicle=vehicles[vid][0], today=today, odometer_km=odo.get(vid, 0.0),
            km_per_day=kmpd.get(vid), last_alignment=last_s.get(vid),
            last_suspension_inspection=last_c.get(vid),
            alignment_interval=a_int, suspension_interval=s_int,
            drift=tuple(drift_fc[vid]), wear=tuple(wear_fc.get(vid, ())),
            findings=tuple(findings.get(vid, ())), steps=tuple(steps_of[vid]),
            compliance=tuple(c_verdicts))
        advice = adv.advise(state)
        payload = {
            "model_version": adv.MODEL_VERSION, "today": today.isoformat(),
            "odometer_km": odo.get(vid, 0.0), "km_per_day": kmpd.get(vid),
            "drift": drift[vid], "wear": wear.get(vid, {}), "compliance": c_out,
            "conditions": c_used, "assumptions": ASSUMPTIONS,
            "advice": [advice_json(a) for a in advice],
        }
        results[vid] = (payload, advice)
    T["advice"] = T.get("advice", 0) + time.perf_counter() - t5
    # vehicles outside the fast path: the per-vehicle reference (it may refuse the data)
    for vid in sorted(bad):
        st.fallback_vehicles += 1
        from .inputs import vehicle_data

        try:
            results[vid] = analysis.analyse(vehicle_data(Vehicle.objects.select_related(
                "platform", "workshop").get(pk=vid)))
        except ValueError as exc:
            log.warning("vehicle %s not analysed: %s", vid, exc)
    st.vehicles += len(vehicle_ids)
    st.analysed += len(results)
    return results


def _spec_json(cache: PlatformCache, corner: str, angle: str) -> dict | None:
    """The payload's ``spec`` of a corner and angle (one dict, shared by the chunk's entries:
    nothing writes to it), or None without a spec."""
    spec = cache.specs.get((CORNER_AXLE[corner], angle))
    if spec is None:
        return None
    return {"nominal": spec.nominal_deg, "tolerance": spec.tolerance_deg, "source": spec.source}


def _fallback_series(rows: pd.DataFrame, adj: pd.DataFrame, vid: int, corner: str, angle: str,
                     today: dt.date):
    """The core's own ``fit_drift`` for one series (used where the step screen signals)."""
    times = rows["t"].to_numpy()
    at = np.sort(adj.loc[adj["vehicle_id"] == vid, "t"].to_numpy())
    flags = np.zeros(len(times), dtype=bool)
    for i in range(1, len(times)):
        flags[i] = bool(np.any((at > times[i - 1]) & (at <= times[i])))
    x_km = rows["odometer_km"].to_numpy(float)
    y = rows[f"{angle}_deg"].to_numpy(float)
    days = rows["day"].to_numpy()
    fit = fit_drift(x_km, y, adjusted_before=flags, measurement_sd=REPEATABILITY[angle])
    entry: dict = {"n_used": fit.n_used, "segment_start": fit.segment_start, "steps": [],
                   "slope_deg_per_10k": None}
    steps = []
    for s in fit.steps:
        idx = int(s.start_index)
        before = y[max(fit.segment_start, idx - 3):idx]
        after = y[idx:idx + 3]
        size = float(np.median(after) - np.median(before)) if before.size else 0.0
        on = _day(days[idx])
        entry["steps"].append({"index": idx, "odometer_km": float(x_km[idx]), "on": on.isoformat(),
                               "direction": int(s.direction), "size_deg": size})
        steps.append(adv.ImpactStep(corner=corner, angle=angle, detected_on=on,
                                    odometer_km=float(x_km[idx]), size_deg=size))
    if fit.trend is None:
        return entry, None, steps
    t = fit.trend
    entry["slope_deg_per_10k"] = t.slope * 1e4
    entry["slope_se_deg_per_10k"] = t.slope_se * 1e4
    if fit.fit is not None:
        entry["slope_ci_deg_per_10k"] = [fit.fit.slope_low * 1e4, fit.fit.slope_high * 1e4]
    x_days = (days - (today - EPOCH).days).astype(float)
    fit_t = fit_drift(x_days[fit.fit_start:], y[fit.fit_start:], measurement_sd=REPEATABILITY[angle],
                      find_steps=False)
    td = fit_t.trend
    day_trend = None if td is None else (td.slope, td.slope_se, td.x_ref, td.y_ref, td.residual_sd,
                                         td.n)
    return entry, (t.slope, t.slope_se, t.x_ref, t.y_ref, t.residual_sd, t.n,
                   fit.sampling_variance, day_trend), steps


def _shrink_and_forecast(pend, cache: PlatformCache, drift, drift_fc, odo, today_of, kmpd) -> None:
    """Shrink toward the pooled rate (as :func:`analytics.core.pooling.shrink_toward`), then the
    forecast crossing of each series' tolerance band, all series at once."""
    if not pend:
        return
    m = len(pend)
    slope = np.array([p[3] for p in pend])
    se = np.array([p[4] for p in pend])
    xref = np.array([p[5] for p in pend])
    yref = np.array([p[6] for p in pend])
    rsd = np.array([p[7] for p in pend])
    n = np.array([p[8] for p in pend], dtype=float)
    var = np.array([p[9] for p in pend])
    lower = np.full(m, np.nan)
    upper = np.full(m, np.nan)
    has_spec = np.zeros(m, dtype=bool)
    for i, (vid, corner, angle, *_rest) in enumerate(pend):
        entry = drift[vid][f"{corner}.{angle}"]
        pooled = cache.pooled.get((corner, angle))
        if pooled is not None and pooled.vehicles >= 3 and math.isfinite(pooled.tau2):
            var_mu = pooled.mean_se ** 2
            v = var[i]
            if not math.isfinite(v):
                s_slope, s_se, w = pooled.mean, math.sqrt(pooled.tau2 + var_mu), 1.0
            else:
                b = v / (v + pooled.tau2) if (v + pooled.tau2) > 0 else 1.0
                s_slope = pooled.mean + (1.0 - b) * (slope[i] - pooled.mean)
                s_se, w = math.sqrt((1.0 - b) * v + b * b * var_mu), b
            slope[i], se[i] = float(s_slope), float(s_se)
            entry["shrunk_slope_deg_per_10k"] = s_slope * 1e4
            entry["weight_on_pooled"] = w
            entry["pooled_deg_per_10k"] = pooled.mean * 1e4
        entry["trend"] = {"slope": float(slope[i]), "slope_se": float(se[i]), "x_ref": float(xref[i]),
                          "y_ref": float(yref[i]), "residual_sd": float(rsd[i]), "n": int(n[i])}
        if pend[i][10] is not None:
            entry["slope_deg_per_year"] = pend[i][10][0] * 365.25
        spec = cache.specs.get((CORNER_AXLE[corner], angle))
        if spec is not None:
            has_spec[i] = True
            lower[i], upper[i] = spec.lower_deg, spec.upper_deg
    rows = np.nonzero(has_spec)[0]
    if not rows.size:
        return
    cur = np.array([odo.get(pend[i][0], 0.0) for i in rows])
    e, li, la, side = crossings(slope[rows], se[rows], xref[rows], yref[rows], rsd[rows], n[rows],
                                current=cur, lower=lower[rows], upper=upper[rows],
                                horizon=np.full(rows.size, HORIZON_KM))
    # the same drift over time (days before today, today = 0): dates that hold standing still
    drows = np.array([j for j, i in enumerate(rows) if pend[i][10] is not None], dtype=int)
    today, rate = _days_and_rates([pend[i][0] for i in rows], today_of, kmpd)
    tdays = np.full((rows.size, 3), np.nan)
    if drows.size:
        dt_ = np.array([pend[rows[j]][10] for j in drows], dtype=float)  # (k, 6)
        hd = np.array([HORIZON_KM / r if (r := kmpd.get(pend[rows[j]][0])) else 3 * 365.25
                       for j in drows])
        de, dl, dla, _ = crossings(*dt_.T, current=np.zeros(drows.size), lower=lower[rows][drows],
                                   upper=upper[rows][drows], horizon=hd)
        # days from today (≥ 0) → dates, NaN for none
        tdays[drows] = today[drows, None] + np.floor(np.stack([de, dl, dla], axis=1))
    fcs = _forecasts(e, li, la, side, current_km=cur, today=today, km_per_day=rate,
                     model=DRIFT_MODEL, time_days=tdays)
    for (fc, fc_json), i in zip(fcs, rows, strict=True):
        vid, corner, angle = pend[i][:3]
        drift[vid][f"{corner}.{angle}"]["forecast"] = fc_json
        drift_fc[vid].append(adv.DriftForecastInput(corner=corner, angle=angle, forecast=fc))


def _segment_stack(rows: pd.DataFrame, rep: pd.DataFrame, value: np.ndarray):
    """Current segments (since the last replacement of the part) of each (vehicle, corner, part)
    group of ``rows`` (sorted by group then time) → group keys, starts, X, Y stacks."""
    gk = rows["gk"].to_numpy()
    t = rows["t"].to_numpy()
    if len(rep):
        flags = _flags_between(gk, t, rep["gk"].to_numpy(), rep["t"].to_numpy())
    else:
        flags = np.zeros(len(rows), dtype=bool)
    first, gid, starts, sizes = runs(gk)
    flags[first] = False
    cs = np.cumsum(flags)
    seg = cs - cs[starts][gid]
    now = seg == seg[starts + sizes - 1][gid]  # the group's last segment
    idx = (np.arange(gk.size) - starts[gid])[now]
    _, g, cstarts, _ = runs(gk[now])
    keys = gk[now][cstarts]
    pos = idx - idx[cstarts][g]
    W = int(pos.max()) + 1 if pos.size else 1
    X = stack(g, pos, rows["odometer_km"].to_numpy(float)[now], len(keys), W)
    Y = stack(g, pos, np.asarray(value, dtype=float)[now], len(keys), W)
    return keys, X, Y


def _wear_chunk(ids, ck, ev, cache: PlatformCache, odo, today_of, kmpd, st: ChunkStats):
    """Ball-joint play and bush stiffness forecasts of every vehicle of the chunk."""
    wear: dict[int, dict] = {}
    fcs: dict[int, list] = {}
    if ck.empty:
        return wear, fcs
    # groups: sorted runs of gk = (vehicle·4 + corner index)·64 + part index (corners and parts
    # indexed in text order: the stable sort by vehicle, corner, part, time)
    part_ix = {p: i for i, p in enumerate(sorted(PARTS_BY_CODE))}
    ck = ck[ck["part"].isin(part_ix)]
    cix = {c: i for i, c in enumerate(CORNERS)}
    gk = (ck["vehicle_id"].to_numpy() * 4 + ck["corner"].map(cix).to_numpy()) * 64 \
        + ck["part"].map(part_ix).to_numpy()
    order = np.lexsort((ck["t"].to_numpy(), gk))
    ck = ck.take(order).assign(gk=gk[order])
    rep = ev[(ev["kind"].to_numpy() == "part_replaced") & ev["part"].isin(part_ix).to_numpy()
             & ev["corner"].isin(cix).to_numpy()]
    rep = rep.assign(gk=(rep["vehicle_id"].to_numpy() * 4 + rep["corner"].map(cix).to_numpy()) * 64
                     + rep["part"].map(part_ix).to_numpy())
    _, gid, _, sizes = runs(ck["gk"].to_numpy())
    play_n = np.bincount(gid, weights=ck["play_mm"].notna().to_numpy())[gid]
    defl_n = np.bincount(gid, weights=ck["deflection_mm"].notna().to_numpy())[gid]
    keep = sizes[gid] >= 2
    ck, play_n, defl_n = ck[keep], play_n[keep], defl_n[keep]
    kinds = ck["part"].map({c: p.kind for c, p in PARTS_BY_CODE.items()})
    pending = {}  # gk → (vid, corner, part_code, entry, kind)

    # -- ball joints: play against km, limit from the platform
    bj = ck[(kinds == "ball_joint") & (play_n >= 2) & ck["play_mm"].notna()]
    cols = {c: bj[c].to_numpy() for c in ("vehicle_id", "corner", "part", "odometer_km", "play_mm")}
    for gk, ix in bj.groupby("gk", sort=False).indices.items():
        i0 = ix[0]
        code = cols["part"][i0]
        limit = cache.limits.get(code)
        entry = {"part": PARTS_BY_CODE[code].label, "kind": "play",
                 "km": cols["odometer_km"][ix].tolist(), "play_mm": cols["play_mm"][ix].tolist(),
                 "limit_mm": limit.max_play_mm if limit else None,
                 "limit_source": limit.source if limit else None}
        pending[gk] = (int(cols["vehicle_id"][i0]), cols["corner"][i0], code, entry, "play")
    # -- bushes: log stiffness
    bu = ck[(kinds == "bush") & (defl_n >= 2)]
    bu = bu[bu["deflection_mm"].notna() & (bu["deflection_mm"] > 0)]
    bu = bu.assign(k=bu["deflection_force_n"] / bu["deflection_mm"])
    cols = {c: bu[c].to_numpy() for c in ("vehicle_id", "corner", "part", "odometer_km", "k")}
    for gk, ix in bu.groupby("gk", sort=False).indices.items():
        i0 = ix[0]
        code = cols["part"][i0]
        entry = {"part": PARTS_BY_CODE[code].label, "kind": "stiffness",
                 "km": cols["odometer_km"][ix].tolist(),
                 "stiffness_N_per_mm": cols["k"][ix].astype(float).tolist()}
        pending[gk] = (int(cols["vehicle_id"][i0]), cols["corner"][i0], code, entry, "stiffness")

    # -- play forecasts, stacked
    with_limit = {code for code, lim in cache.limits.items() if lim is not None and lim.max_play_mm}
    play_rows = bj[bj["part"].isin(with_limit)] if len(bj) else bj
    play_fc = {}
    fc_json_of = {}  # the JSON of forecasts made here (the core's own get theirs below)
    if len(play_rows):
        keys, X, Y = _segment_stack(play_rows, rep, play_rows["play_mm"].to_numpy(float))
        f = line_fits(X, Y, np.full(len(keys), ASSUMPTIONS["play_repeatability_mm"]))
        xdec = decreasing_runs(play_rows["gk"].to_numpy(), play_rows["odometer_km"].to_numpy())
        good = [i for i, k in enumerate(keys) if f.ok[i] and not xdec.get(k, False)]
        gi = np.array(good, dtype=int)
        if gi.size:
            cur = np.array([odo[pending[keys[i]][0]] for i in gi])
            lim = np.array([cache.limits[pending[keys[i]][2]].max_play_mm for i in gi], float)
            e, li, la, side = crossings(f.slope[gi], f.slope_se[gi], f.x_ref[gi], f.y_ref[gi],
                                        f.residual_sd[gi], f.n[gi].astype(float), current=cur,
                                        lower=np.full(gi.size, -np.inf), upper=lim,
                                        horizon=np.full(gi.size, HORIZON_KM))
            today, rate = _days_and_rates([pending[keys[i]][0] for i in gi], today_of, kmpd)
            for i, pair in zip(gi, _forecasts(e, li, la, side, current_km=cur, model=PLAY_MODEL,
                                              today=today, km_per_day=rate), strict=True):
                play_fc[keys[i]], fc_json_of[keys[i]] = pair
        where = play_rows.groupby("gk").indices
        vals = play_rows[["odometer_km", "play_mm"]].to_numpy(float)
        for i, k in enumerate(keys):  # the rest: the core itself (it explains the refusal)
            if k in play_fc:
                continue
            v = vals[where[k]]
            if not f.ok[i] and not xdec.get(k, False) and np.all(np.isfinite(v)) \
                    and np.all(v[:, 1] >= 0):
                # valid values, fewer than two distinct km since the last replacement: the
                # core's own refusal, without refitting the series to say so
                pending[k][3]["note"] = NEED_TWO_PLAY_KM
                continue
            st.fallback_series += 1
            vid, corner, code, entry, _ = pending[k]
            g = play_rows.iloc[where[k]]
            rp = np.sort(rep.loc[rep["gk"] == k, "t"].to_numpy())
            t = g["t"].to_numpy()
            flags = np.array([False] + [bool(np.any((rp > t[j - 1]) & (rp <= t[j])))
                                        for j in range(1, len(t))])
            try:
                wf = forecast_play(g["odometer_km"].to_numpy(float), g["play_mm"].to_numpy(float),
                                   limit_mm=cache.limits[code].max_play_mm, current_km=odo[vid],
                                   current_date=today_of[vid], km_per_day=kmpd.get(vid),
                                   horizon_km=HORIZON_KM, replaced_before=flags,
                                   measurement_sd_mm=ASSUMPTIONS["play_repeatability_mm"])
                play_fc[k] = wf.forecast
            except ValueError as exc:
                entry["note"] = str(exc)

    # -- stiffness criterion forecasts, stacked per platform corner and link
    stiff_fc = {}
    def criterion_applies(k) -> bool:
        corner, code = pending[k][1], pending[k][2]
        return (corner.startswith("R") and corner in cache.new
                and PARTS_BY_CODE[code].links[0] in cache.new[corner].link_names)

    applies = {k: criterion_applies(k) for k in pd.unique(bu["gk"])} if len(bu) else {}
    crit = bu[bu["gk"].map(applies).to_numpy(dtype=bool)] if len(bu) else bu
    if len(crit):
        keys, X, Y = _segment_stack(crit, rep, np.log(crit["k"].to_numpy(float)))
        f = line_fits(X, Y, np.full(len(keys), ASSUMPTIONS["stiffness_relative_sd"]))
        xdec = decreasing_runs(crit["gk"].to_numpy(), crit["odometer_km"].to_numpy())
        by_fn: dict = {}
        for i, k in enumerate(keys):
            vid, corner, code, entry, _ = pending[k]
            if not f.ok[i] or xdec.get(k, False):
                entry["note"] = "need stiffness values at two or more distinct odometer readings" \
                    if not xdec.get(k, False) else "x must be non-decreasing in reading order"
                continue
            by_fn.setdefault((corner, PARTS_BY_CODE[code].links[0]), []).append(i)
        for (corner, link), rows in by_fn.items():
            below_zero = cache.toe_out_sign(corner, link)
            gi = np.array(rows)
            cur = np.array([odo[pending[keys[i]][0]] for i in gi])
            e, li, la = _stiffness_crossings(f, gi, below_zero, cur)
            today, rate = _days_and_rates([pending[keys[i]][0] for i in gi], today_of, kmpd)
            for i, pair in zip(gi, _forecasts(
                    e, li, la, None, current_km=cur, model=analysis_bush_model(), today=today,
                    km_per_day=rate, side_word="lower", notes=(TOE_OUT_LABEL,)), strict=True):
                stiff_fc[keys[i]], fc_json_of[keys[i]] = pair
                pending[keys[i]][3]["criterion"] = \
                    "cornering toe change of the outer rear wheel turns toe-out"

    for gk in sorted(pending):  # (vehicle, corner, part) order, as the per-vehicle groupby
        vid, corner, code, entry, kind = pending[gk]
        fc = play_fc.get(gk) if kind == "play" else stiff_fc.get(gk)
        if fc is not None:
            # a stiffness forecast never carries the no-rate note (as the core)
            entry["forecast"] = fc_json_of.get(gk) or analysis._forecast_json(fc)
            fcs.setdefault(vid, []).append(adv.WearForecastInput(corner, PARTS_BY_CODE[code].label, fc))
        wear.setdefault(vid, {})[f"{corner}.{code}"] = entry
    return wear, fcs


def analysis_bush_model() -> str:
    from analytics.core.wear import BUSH_MODEL

    return BUSH_MODEL


def _stiffness_crossings(f: LineFits, gi: np.ndarray, below_zero, cur: np.ndarray):
    """Vectorised :func:`~analytics.core.wear.forecast_stiffness_criterion` with the toe-out rule
    (fails where the criterion is below 0 deg) for rows ``gi`` of the fits; ``below_zero`` maps
    stiffness (N/mm, any shape) to ``criterion < 0`` (see :class:`SignByStiffness`)."""
    slope, se, xref, yref = f.slope[gi], f.slope_se[gi], f.x_ref[gi], f.y_ref[gi]
    rsd, n = f.residual_sd[gi], f.n[gi].astype(float)
    u = np.linspace(-1.0, 1.0, BAND_SAMPLES)

    grid = LinspaceGrid(cur, cur + HORIZON_KM, FORECAST_GRID_POINTS)
    # a block can fail only where some sample's stiffness can be below zero: the samples lie
    # within exp(centre ± half-width), bounded per block (see block_bounds)
    starts, ends, c_min, c_max, _h_min, h_max, unbounded = block_bounds(
        grid, slope, se, xref, yref, rsd, n)
    with np.errstate(over="ignore"):
        can_fail = ~below_zero.never_below_zero(np.exp(c_min - h_max), np.exp(c_max + h_max))
    can_fail[unbounded] = True

    def evaluate(rows, j0, j1):
        mid, half = centre_half(grid[rows, j0:j1],
                                *[p[rows, None] for p in (slope, se, xref, yref, rsd, n)])
        return below_zero.band_fails(mid, half, u)

    def make_test(rows, which):  # 0: any sample fails, 1: the centre fails, 2: every sample fails
        terms = band_terms(*[p[rows] for p in (slope, se, xref, yref, rsd, n)])
        some, at_centre = which == 0, which == 1

        def test(x):  # few rows, 40 times: the samples themselves (band_fails pays off on blocks)
            mid, half = centre_half_of(x, *terms)
            f = below_zero(np.exp(mid[:, None] + u * half[:, None]))
            return np.where(some, f.any(axis=1),
                            np.where(at_centre, f[:, u.size // 2], f.all(axis=1)))
        return test

    firsts = scan_blocks(starts, ends, [can_fail] * 3, evaluate)
    early, likely, late = bisect_first(grid, firsts, make_test, cur)
    return early, likely, late


def _findings_chunk(latest: pd.DataFrame, ev: pd.DataFrame) -> dict[int, list]:
    """Component findings of the latest check per (corner, part), skipping parts replaced since."""
    out: dict[int, list] = {}
    if latest.empty:
        return out
    rep = ev[ev["kind"].to_numpy() == "part_replaced"]
    last_rep: dict[tuple, int] = {}  # (vehicle, corner, part) → its last replacement (ns)
    for key, t in zip(zip(rep["vehicle_id"].tolist(), rep["corner"].tolist(),
                          rep["part"].tolist(), strict=True), rep["t"].tolist(), strict=True):
        if key not in last_rep or t > last_rep[key]:
            last_rep[key] = t
    cols = (latest[c].tolist() for c in ("vehicle_id", "corner", "part", "t", "findings",
                                          "defect_category", "verdict", "day", "odometer_km"))
    for vid, corner, code, t, findings, category, verdict, day, km in zip(*cols, strict=True):
        replaced = last_rep.get((vid, corner, code))
        if replaced is not None and replaced > t:
            continue
        part = PARTS_BY_CODE.get(code)
        text = ", ".join(x for x in findings if x != "none") or "no finding"
        out.setdefault(vid, []).append(adv.ComponentFinding(
            corner=corner, part=part.label if part else code, category=category or None,
            note=f"{text}; verdict {verdict.replace('_', ' ')}", checked_on=_day(day),
            odometer_km=float(km)))
    return out


def recompute_chunk(platform_id: int, vehicle_ids: list[int], *, pool: bool = False) -> ChunkStats:
    """Analyse one platform chunk: skip vehicles whose current inputs already have a result,
    analyse the rest vectorised and store them. Safe to run twice (the second run writes nothing).

    ``pool``: the chunk holds every vehicle of the platform; its pooled rates are refreshed first
    from the chunk's own read (:func:`platform_pool_fast`), so the platform is read once.
    """
    with _cyclic_gc_paused():
        return _recompute_chunk(platform_id, vehicle_ids, pool=pool)


@contextlib.contextmanager
def _cyclic_gc_paused():
    """Python's cyclic garbage collector off for the duration (reference counting still frees
    almost everything): a chunk allocates some hundred thousand short-lived containers, and the
    collections they trigger each walk every object the process holds (≈ 10–15 % of a chunk's
    worker CPU, measured). Whatever cycles the chunk left are collected when it ends (they are
    all in the youngest generation, so that collection walks only the chunk's survivors)."""
    if not gc.isenabled():
        yield
        return
    gc.disable()
    try:
        yield
    finally:
        gc.enable()
        gc.collect(0)


def _recompute_chunk(platform_id: int, vehicle_ids: list[int], *, pool: bool) -> ChunkStats:
    st = ChunkStats()
    t0 = time.perf_counter()
    frames = None
    pooled: dict = {}
    if pool:
        frames = read_frames(list(vehicle_ids))
        st.seconds["read"] = time.perf_counter() - t0
        platform_pool_fast(platform=Platform.objects.get(pk=platform_id), readings=frames.readings,
                           stacks_out=pooled)
        st.seconds["pool"] = time.perf_counter() - t0 - st.seconds["read"]
    t1 = time.perf_counter()
    stamp = _platform_stamp(platform_id)
    keys = input_keys(list(vehicle_ids), stamp)
    st.keys = keys
    done = set(_fetch(DONE_SQL, [list(keys), MODEL_VERSION, sorted(set(keys.values()))]))
    todo = {v for v, k in keys.items() if (v, k) not in done}
    st.seconds["keys"] = time.perf_counter() - t1
    results = analyse_chunk(platform_id, list(keys), only=todo, stats=st, frames=frames,
                            drift_reuse=pooled.get("stacks")) if todo else {}
    t2 = time.perf_counter()
    owner_of = dict(_fetch(OWNERS_SQL, [list(results)]))
    st.written = write_results(platform_id, keys, results, owner_of)
    st.seconds["write"] = time.perf_counter() - t2
    st.seconds["total"] = time.perf_counter() - t0
    return st


def chunks(size: int = CHUNK_VEHICLES) -> list[tuple[int, list[int]]]:
    """Every vehicle exactly once, as ``(platform_id, vehicle_ids)`` chunks of at most ``size``."""
    out: list[tuple[int, list[int]]] = []
    rows = Vehicle.objects.order_by("platform_id", "pk").values_list("platform_id", "pk")
    current: list[int] = []
    current_p = None
    for p, v in rows.iterator(chunk_size=20_000):
        if p != current_p or len(current) >= size:
            if current:
                out.append((current_p, current))
            current, current_p = [], p
        current.append(v)
    if current:
        out.append((current_p, current))
    return out


def fleet_recompute(*, chunk_size: int = CHUNK_VEHICLES, fan_out: bool = False) -> int:
    """Refresh pooled rates, then every chunk. A platform that fits in one chunk has its pooled
    rates refreshed by that chunk from its own read; a larger one here first. ``fan_out``: send
    the chunks to the workers as ``analytics.tasks.recompute_chunk`` (after commit); otherwise
    run them here. Returns the vehicles covered."""
    from . import tasks

    todo = chunks(chunk_size)
    per_platform: dict[int, int] = {}
    for p, _ids in todo:
        per_platform[p] = per_platform.get(p, 0) + 1
    for platform in Platform.objects.filter(pk__in=[p for p, n in per_platform.items() if n > 1]):
        platform_pool_fast(platform=platform)
    # largest chunks first: the workers finish close together (longest-processing-time order)
    for p, ids in sorted(todo, key=lambda c: -len(c[1])):
        whole = per_platform[p] == 1
        if fan_out:
            transaction.on_commit(lambda p=p, ids=ids, whole=whole: tasks.recompute_chunk.apply_async(
                args=[p, ids], kwargs={"pool": whole}))
        else:
            recompute_chunk(p, ids, pool=whole)
    return sum(len(ids) for _, ids in todo)


# --------------------------------------------------------------------------- pooled rates


def platform_pool_fast(*, platform: Platform, readings: pd.DataFrame | None = None,
                       stacks_out: dict | None = None) -> int:
    """:func:`analytics.services.platform_pool` for a whole platform at once.

    One read of the platform's current readings; the same fits (as-adjusted sessions start a new
    segment; steps screened, the core's ``fit_drift`` where the screen signals) and the same
    shrinkage (:func:`analytics.core.drift.shrink_slopes` with ``shrink_drift``'s variances).
    A pooled rate is only rewritten when it changed, so a rerun keeps the vehicles' input keys.
    ``readings``: the platform's current readings already read (``ChunkFrames.readings`` of all
    its vehicles), else they are read here. ``stacks_out``: receives the drift stacks under
    ``"stacks"`` (for :func:`analyse_chunk` to reuse). Returns the pooled rates stored.
    """
    from analytics.core.drift import MIN_READINGS_OWN_SCALE, shrink_slopes

    if readings is None:
        ids = list(platform.vehicles.values_list("pk", flat=True))
        if not ids:
            return 0
        readings = read_readings(ids)
    rd = readings
    if rd.empty:
        return 0
    kind = rd["kind"].to_numpy()  # numpy compares object arrays several times faster than pandas
    found = rd[kind == "as_found"]
    adj = rd.loc[kind == "as_adjusted", ["vehicle_id", "t"]].drop_duplicates()
    if found.empty:
        return 0
    ds = _drift_stacks(found, adj)
    if stacks_out is not None:
        stacks_out["stacks"] = ds
    keys = ds["keys"]
    n = 0
    existing = {(p.corner, p.angle): p for p in platform.pooled_rates.all()}
    for ci, corner in enumerate(CORNERS):
        sel = np.nonzero((keys % 4) == ci)[0]
        if not sel.size:
            continue
        for angle in ANGLES:
            f, alarm = ds["fits"][angle], ds["alarms"][angle]
            n_used = f.n[sel].astype(float)
            rsd, sxx = f.residual_sd[sel].copy(), f.sxx[sel].copy()
            slope = np.where(f.ok[sel], f.slope[sel], np.nan)
            se = (f.slope_high[sel] - f.slope_low[sel]) / (2.0 * Z95)
            for j, gi in enumerate(sel):
                if alarm[gi] or ds["x_dec"].get(keys[gi], False):
                    rows = ds["found"][ds["found"]["vc"] == keys[gi]]
                    t = rows["t"].to_numpy()
                    at = np.sort(adj.loc[adj["vehicle_id"] == keys[gi] // 4, "t"].to_numpy())
                    flg = np.array([False] + [bool(np.any((at > t[i - 1]) & (at <= t[i])))
                                              for i in range(1, len(t))])
                    try:
                        fit = fit_drift(rows["odometer_km"].to_numpy(float),
                                        rows[f"{angle}_deg"].to_numpy(float), adjusted_before=flg,
                                        measurement_sd=REPEATABILITY[angle])
                    except ValueError:  # refused (an odometer going backwards): left out
                        n_used[j], rsd[j], sxx[j], slope[j], se[j] = 0.0, 0.0, 0.0, np.nan, np.nan
                        continue
                    n_used[j], rsd[j], sxx[j] = fit.n_used, fit.residual_sd, fit.sxx
                    slope[j] = fit.fit.slope if fit.fit is not None else np.nan
                    se[j] = fit.fit.slope_se if fit.fit is not None else np.nan
            dof = np.maximum(n_used - 2, 0)
            pooled_s2 = float(np.sum(dof * rsd**2) / np.sum(dof)) if np.sum(dof) > 0 else 0.0
            s2 = rsd**2
            s2 = np.where(n_used < MIN_READINGS_OWN_SCALE, np.maximum(s2, pooled_s2), s2)
            usable = np.isfinite(slope) & (sxx > 0)
            with np.errstate(divide="ignore", invalid="ignore"):
                var = np.maximum(se**2, s2 / np.where(sxx > 0, sxx, 1.0))
            good = usable & (var > 0)
            b = np.where(good, slope, np.nan)
            v = np.where(good, var, np.inf)
            pooled = shrink_slopes(b, v).pooled
            if pooled.vehicles < 3:
                continue
            values = dict(mean=pooled.mean, mean_se=pooled.mean_se, tau2=pooled.tau2,
                          vehicles=pooled.vehicles, method=pooled.method)
            old = existing.get((corner, angle))
            if old is None or any(getattr(old, k) != val for k, val in values.items()):
                PooledRate.objects.update_or_create(platform=platform, corner=corner, angle=angle,
                                                    defaults=values)
            n += 1
    return n
