"""Optimistic concurrency for append-only records: ETags, If-Match and If-None-Match.

A stored session or check never changes in place; the one thing that can happen to it is that a
correction supersedes it (once: ``supersedes`` is one-to-one). So a record's version is its id and
whether — and by what — it was superseded:

    "session-12"                    session 12, current
    "session-12.superseded-by-15"   session 12 after session 15 corrected it

A vehicle's version is the newest session and check stored for it (corrections included):
``"vehicle-3.s-41.c-17"``. ETags are strong (the representation is a function of the tag).

A correction must send ``If-Match`` with the ETag of the version it corrects. No If-Match → 428;
the session was corrected meanwhile → 409 naming the newer record (the database's one-to-one
``supersedes`` gives the same answer when two corrections race past the first check); any other
mismatch → 412.
"""
from __future__ import annotations

from django.db.models import Max, OuterRef, QuerySet, Subquery
from django.utils.http import parse_etags

from inspections.models import AlignmentSession, ComponentCheck, Vehicle

PREFIX = {AlignmentSession: "session", ComponentCheck: "check"}


def with_newer(queryset: QuerySet) -> QuerySet:
    """Annotate ``newer_pk``: the id of the record that supersedes each row, or None."""
    newer = queryset.model.objects.filter(supersedes=OuterRef("pk")).values("pk")[:1]
    return queryset.annotate(newer_pk=Subquery(newer))


def newer_id(record) -> int | None:
    if hasattr(record, "newer_pk"):
        return record.newer_pk
    return type(record).objects.filter(supersedes=record).values_list("pk", flat=True).first()


def record_etag(record) -> str:
    prefix = PREFIX[type(record)]
    newer = newer_id(record)
    if newer is None:
        return f'"{prefix}-{record.pk}"'
    return f'"{prefix}-{record.pk}.superseded-by-{newer}"'


def vehicle_versions(vehicle: Vehicle) -> tuple[int | None, int | None]:
    """(newest session id, newest check id) stored for the vehicle, corrections included."""
    s = AlignmentSession.objects.filter(vehicle=vehicle).aggregate(m=Max("pk"))["m"]
    c = ComponentCheck.objects.filter(vehicle=vehicle).aggregate(m=Max("pk"))["m"]
    return s, c


def vehicle_etag(vehicle: Vehicle, newest_session_id: int | None, newest_check_id: int | None) -> str:
    return f'"vehicle-{vehicle.pk}.s-{newest_session_id or 0}.c-{newest_check_id or 0}"'


def chain_end(record):
    """The current record at the end of ``record``'s correction chain."""
    model = type(record)
    current = record
    while True:
        nxt = model.objects.filter(supersedes=current).first()
        if nxt is None:
            return current
        current = nxt


def if_match(request) -> list[str] | None:
    """The entity tags of the request's If-Match header, or None when there is none."""
    header = (request.headers.get("If-Match") or "").strip()
    if not header:
        return None
    return parse_etags(header)


def strong_match(tags: list[str], etag: str) -> bool:
    """RFC 9110 §13.1.1: If-Match compares strongly; weak tags never match."""
    return any(tag == etag for tag in tags if not tag.startswith("W/"))


def not_modified(request, etag: str) -> bool:
    """RFC 9110 §13.1.2: If-None-Match compares weakly (``W/`` ignored); ``*`` matches."""
    header = (request.headers.get("If-None-Match") or "").strip()
    if not header:
        return False
    tags = parse_etags(header)
    return "*" in tags or any(tag.removeprefix("W/") == etag for tag in tags)
