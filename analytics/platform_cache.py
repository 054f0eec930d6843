"""Per-process caches of what is the same for every vehicle of a platform (corners, specs,
limits, pooled rates, stiffness → toe-out criteria, compliance outcomes per measured
condition), checked against the database by one digest query before each use."""
from __future__ import annotations

import functools
import logging
import time
from dataclasses import asdict
from types import SimpleNamespace

from django.db import connection

from analytics.core import corner_from_dict, mirror_corner
from analytics.core.condition import LinkCondition, measured_corner
from analytics.core.load_cases import CORNERS
from analytics.core.stiffness_sign import SignByStiffness
from inspections.models import Platform
from inspections.models.catalogue import CORNER_AXLE, CORNER_SIDE

from . import analysis
from .models import PooledRate

log = logging.getLogger(__name__)


class PlatformCache:
    """What is the same for every vehicle of a platform: corners, specs, limits, pooled rates,
    stiffness → toe criteria, and compliance results per distinct measured condition."""

    def __init__(self, platform: Platform):
        self.platform = platform
        self.data_like = SimpleNamespace(vehicle=SimpleNamespace(platform=platform))
        self.pooled = {(p.corner, p.angle): p for p in platform.pooled_rates.all()}
        self.specs = {(s.axle, s.quantity): s for s in platform.specs.all()}
        self.limits = {lim.part: lim for lim in platform.limits.all()}
        geo = {c.axle: c.geometry for c in platform.corners.all()}
        self.new = {}
        for pos in CORNERS:
            g = geo.get(CORNER_AXLE[pos])
            if g is None:
                continue
            left = corner_from_dict(g)
            self.new[pos] = left if CORNER_SIDE[pos] == "left" else mirror_corner(left)
        self._toe_fn: dict = {}
        self._toe_sign: dict = {}
        self._compliance: dict = {}

    def toe_fn(self, pos: str, link: str):
        key = (pos, link)
        if key not in self._toe_fn:
            self._toe_fn[key] = analysis._toe_change_of_stiffness(self.data_like, self.new[pos],
                                                                 pos, link)
        return self._toe_fn[key]

    def toe_out_sign(self, pos: str, link: str) -> SignByStiffness:
        """``toe change < 0`` as a function of one link's stiffness (see :class:`SignByStiffness`)."""
        key = (pos, link)
        if key not in self._toe_sign:
            self._toe_sign[key] = SignByStiffness(self.toe_fn(pos, link))
        return self._toe_sign[key]

    def compliance(self, pos: str, conds: tuple):
        """(payload entry, verdicts, conditions_used) for one position and condition key."""
        hit = self._compliance.get((pos, conds))
        if hit is None:
            self.prepare_compliance(pos, [conds])
            hit = self._compliance[(pos, conds)]
        return hit

    def prepare_compliance(self, pos: str, conds_list) -> None:
        """Work out the compliance of every condition key of ``conds_list`` not cached yet, all
        states of the position together (:func:`analytics.analysis.compliance_many`)."""
        todo = [c for c in dict.fromkeys(conds_list) if (pos, c) not in self._compliance]
        if not todo:
            return
        new = self.new[pos]
        cds = [{name: LinkCondition(*vals) for name, vals in conds} for conds in todo]
        measured = [measured_corner(new, cd) if cd else new for cd in cds]
        outs = analysis.compliance_many(self.platform, pos, new, measured)
        for conds, cd, (entry, verdicts) in zip(todo, cds, outs, strict=True):
            self._compliance[(pos, conds)] = (entry, tuple(verdicts),
                                              {k: asdict(v) for k, v in cd.items()})


_CACHES: dict[int, tuple[str, PlatformCache]] = {}


@functools.cache
def _fingerprint_sql() -> str:
    from inspections.models import AlignmentSpec, ComponentLimit, PlatformCorner

    related = ", ".join(
        f"(SELECT string_agg(row_to_json(x)::text, ',' ORDER BY x.id) FROM {m._meta.db_table} x "
        f"WHERE x.platform_id = %(p)s)"
        for m in (AlignmentSpec, ComponentLimit, PlatformCorner, PooledRate))
    return (f"SELECT md5(concat_ws('|', (SELECT row_to_json(x)::text FROM "
            f"{Platform._meta.db_table} x WHERE x.id = %(p)s), {related}))")


def _fingerprint(platform_id: int) -> str:
    """Everything the caches depend on — the platform's row and all rows of its specs, limits,
    corner files and pooled rates — as one digest computed by the database in one query (a
    long-lived worker notices an edited spec or a refreshed pooled rate)."""
    with connection.cursor() as cur:
        cur.execute(_fingerprint_sql(), {"p": platform_id})
        return cur.fetchone()[0]


def platform_cache(platform_id: int) -> PlatformCache:
    """A process-local cache of the platform, rebuilt when anything it depends on changed."""
    key = _fingerprint(platform_id)
    hit = _CACHES.get(platform_id)
    if hit is None or hit[0] != key:
        hit = (key, PlatformCache(Platform.objects.get(pk=platform_id)))
        _CACHES[platform_id] = hit
    return hit[1]


#: Time a starting worker process spends warming caches at most (s): Celery gives a starting
#: process a few seconds to report itself up; platforms past the budget warm on first use.
WARM_BUDGET_S: float = 2.0


def warm_caches(budget_s: float = WARM_BUDGET_S) -> int:
    """Build the platforms' caches and their rear corners' stiffness → toe-out criteria in this
    process (a worker process calls it when it starts, so its first job on a platform does not
    pay for them: ≈ 40 ms a platform), for at most ``budget_s`` seconds. Returns the platforms
    warmed; a database error is logged, not raised."""
    from django.db import DatabaseError

    if connection.vendor != "postgresql":
        return 0
    n = 0
    t0 = time.monotonic()
    try:
        for pid in Platform.objects.order_by("pk").values_list("pk", flat=True):
            if time.monotonic() - t0 > budget_s:
                break
            cache = platform_cache(pid)
            for pos in ("RL", "RR"):
                for link in cache.new[pos].link_names if pos in cache.new else ():
                    cache.toe_out_sign(pos, link)
            n += 1
    except DatabaseError as exc:
        log.warning("platform caches not warmed: %s", exc)
    finally:
        if not connection.in_atomic_block:
            connection.close()  # a starting worker process: its first job opens its own
    return n
