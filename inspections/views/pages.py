"""Pages of the technician's bay: search, vehicle, the session form, a session and its history.

Every page checks access through ``inspections.scoping``: a vehicle or session the user may not
see answers 404, the same as a missing id; a user who may not record gets 404 on recording pages.
"""
from __future__ import annotations

from django.contrib.auth.decorators import login_required
from django.http import Http404, HttpResponse
from django.shortcuts import redirect, render
from django.template.loader import render_to_string
from django.views.decorators.cache import never_cache

from inspections import selectors
from inspections.models import AlignmentSession, ComponentCheck
from inspections.models.catalogue import (
    CORNERS,
    DEFECT_CATEGORIES,
    FINDINGS,
    PARTS,
    PLAY_DIRECTIONS,
    PLAY_LOADING,
    VERDICTS,
)
from inspections.models.org import Role
from inspections.scoping import can_record, get_visible_or_404, role_of

from .bands import QUANTITY_LABELS, bands_of, place, reading_rows
from .submit import recordable_vehicle

# The lead's pages; addressed by path so this module does not depend on analytics' url names.
MANAGER_HOME = "/analysis/fleet/"
OWNER_HOME = "/analysis/mine/"
RECENT = 5


def home(request):
    """Send each role to its first page; signed-out visitors to the sign-in page."""
    role = role_of(request.user)
    if not request.user.is_authenticated:
        return redirect("login")
    if role in {Role.TECHNICIAN, Role.ADMINISTRATOR}:
        return redirect("bay")
    if role == Role.MANAGER:
        return redirect(MANAGER_HOME)
    if role == Role.OWNER:
        return redirect(OWNER_HOME)
    return render(request, "no_role.html", status=403)


def _require_recorder(user) -> None:
    if not can_record(user):
        raise Http404("not found")


@login_required
def bay(request):
    """Find a vehicle by plate, VIN or fleet number (case, spaces and dashes ignored)."""
    _require_recorder(request.user)
    text = (request.GET.get("q") or "").strip()
    found = list(selectors.vehicle_search(request.user, text)) if text else []
    if len(found) == 1 and request.GET.get("go") != "list":
        return redirect("bay_vehicle", pk=found[0].pk)
    return render(request, "inspections/bay.html", {"q": text, "found": found, "searched": bool(text)})


def _spec_rows(platform, bands) -> list[dict]:
    rows = []
    for axle in ("front", "rear"):
        for quantity in ("toe", "camber", "caster", "sai"):
            band = bands.get((axle, quantity))
            if band is None and quantity in {"caster", "sai"}:
                continue
            rows.append({"axle": axle, "quantity": quantity, "label": QUANTITY_LABELS[quantity],
                         "band": place(None, band), "spec": band})
    return rows


@login_required
def bay_vehicle(request, pk: int):
    """A vehicle in the bay: platform, spec bands with sources, recent sessions and checks."""
    vehicle = recordable_vehicle(request.user, pk)
    platform = vehicle.platform
    bands = bands_of(platform)
    sessions = list(selectors.sessions_of(vehicle).select_related("technician"))
    recent = sessions[-RECENT:]
    checks = list(selectors.checks_of(vehicle).prefetch_related("photos"))[-10:]
    return render(request, "inspections/vehicle.html", {
        "vehicle": vehicle, "platform": platform,
        "diameter_source": platform.source_for("reference_diameter_mm"),
        "spec_rows": _spec_rows(platform, bands),
        "history_rows": reading_rows(recent, bands),
        "sessions": list(reversed(recent)), "session_count": len(sessions),
        "checks": list(reversed(checks)),
    })


def _form_context(vehicle, *, original: AlignmentSession | None = None) -> dict:
    platform = vehicle.platform
    bands = bands_of(platform)
    spec_json = {f"{axle}.{q}": b.as_json() for (axle, q), b in bands.items()}
    corners = []
    previous = {}
    if original is not None:
        previous = {r.corner: r for r in original.readings.all()}
    for code, label in CORNERS:
        axle = "front" if code.startswith("F") else "rear"
        quantities = ["toe", "camber"] + (["caster"] if axle == "front" else []) + ["sai"]
        corners.append({"code": code, "label": label, "axle": axle, "quantities": [
            {"q": q, "label": QUANTITY_LABELS[q], "optional": q in {"caster", "sai"},
             "band": bands.get((axle, q)),
             "previous": getattr(previous.get(code), f"{q}_deg", None)} for q in quantities]})
    parts = [{"code": p.code, "label": p.label, "axle": p.axle, "kind": p.kind} for p in PARTS]
    return {
        "vehicle": vehicle, "platform": platform, "corners": corners, "spec_json": spec_json,
        "diameter_mm": platform.reference_diameter_mm,
        "diameter_kind": platform.get_reference_diameter_kind_display(),
        "diameter_source": platform.source_for("reference_diameter_mm"),
        "kinds": AlignmentSession.KINDS, "parts_front": [p for p in parts if p["axle"] == "front"],
        "parts_rear": [p for p in parts if p["axle"] == "rear"], "parts_json": parts,
        "findings": FINDINGS, "verdicts": VERDICTS, "defect_categories": DEFECT_CATEGORIES,
        "play_directions": PLAY_DIRECTIONS, "play_loading": PLAY_LOADING,
        "corner_choices": CORNERS, "original": original,
    }


@never_cache
@login_required
def session_new(request, pk: int):
    """The session form: header, four corners with live bands, component checks, photos."""
    vehicle = recordable_vehicle(request.user, pk)
    context = _form_context(vehicle)
    context["draft_scope"] = f"u{request.user.pk}.v{vehicle.pk}.new"
    return render(request, "inspections/session_form.html", context)


def _visible_session(user, pk: int) -> AlignmentSession:
    return get_visible_or_404(
        AlignmentSession.objects.select_related("vehicle__platform", "technician"),
        user, prefix="vehicle__", pk=pk)


@login_required
def session_detail(request, pk: int):
    """One session against its bands, its component checks, and its correction history."""
    _require_recorder(request.user)
    session = _visible_session(request.user, pk)
    bands = bands_of(session.vehicle.platform)
    history = selectors.history_of_session(session)
    latest = history[-1]
    return render(request, "inspections/session.html", {
        "session": session, "vehicle": session.vehicle,
        "history": [{"s": s, "rows": reading_rows([s], bands)} for s in history],
        "latest": latest, "is_latest": latest.pk == session.pk,
        "checks": ComponentCheck.objects.filter(session__in=history).current()
        .prefetch_related("photos").order_by("checked_at", "id"),
    })


@never_cache
@login_required
def session_correction(request, pk: int):
    """The session form prefilled with a session's values, to record a correction with a reason."""
    _require_recorder(request.user)
    original = _visible_session(request.user, pk)
    if original.is_superseded:
        return redirect("bay_session", pk=selectors.history_of_session(original)[-1].pk)
    context = _form_context(original.vehicle, original=original)
    context["draft_scope"] = f"u{request.user.pk}.s{original.pk}.correct"
    return render(request, "inspections/session_form.html", context)


def service_worker(request):
    """The bay's service worker, served from /bay/ so its scope covers the bay pages."""
    body = render_to_string("inspections/bay-sw.js", {})
    response = HttpResponse(body, content_type="application/javascript")
    response["Cache-Control"] = "no-cache"
    return response


__all__ = ["bay", "bay_vehicle", "home", "service_worker", "session_correction", "session_detail",
           "session_new"]
