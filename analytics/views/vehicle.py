"""The manager's vehicle view, its CSV and the acknowledge / schedule form."""
from __future__ import annotations

from django import forms
from django.contrib import messages
from django.contrib.auth.decorators import login_required
from django.core.paginator import Paginator
from django.http import Http404
from django.shortcuts import redirect, render
from django.views.decorators.http import require_POST

from analytics import selectors, services
from analytics.core.caution import CAUTION
from fleetsvc.csvsafe import csv_response
from inspections.models import Vehicle
from inspections.scoping import can_manage, get_visible_or_404

ADVICE_PAGE = 20


class AdviceActionForm(forms.Form):
    key = forms.CharField(max_length=120)
    action = forms.ChoiceField(choices=[("acknowledged", "acknowledged"), ("scheduled", "scheduled")])
    scheduled_for = forms.DateField(required=False)
    note = forms.CharField(max_length=300, required=False)

    def clean(self):
        data = super().clean()
        if data.get("action") == "scheduled" and not data.get("scheduled_for"):
            self.add_error("scheduled_for", "Give a date to schedule it for.")
        return data


def _vehicle(request, pk: int) -> Vehicle:
    return get_visible_or_404(Vehicle.objects.select_related("platform", "workshop", "fleet", "owner"),
                              request.user, prefix="", pk=pk)


@login_required
def vehicle(request, pk: int):
    v = _vehicle(request, pk)
    result = services.latest_result(v)
    picture = selectors.vehicle_picture(v, result) if result else None
    advice = v.advice.filter(result=result).order_by("urgency_rank", "due_date", "id") if result else []
    if request.GET.get("format") == "csv":
        return _csv(v, advice, picture)
    page = Paginator(advice, ADVICE_PAGE).get_page(request.GET.get("page") or 1)
    actions = selectors.actions_of(v)
    return render(request, "analytics/vehicle.html", {
        "vehicle": v, "platform": v.platform, "result": result, "picture": picture,
        "page": page, "actions": actions, "can_manage": can_manage(request.user),
        "items": [{"a": a, "action": actions.get(a.key)} for a in page],
    })


@require_POST
@login_required
def advice_action(request, pk: int):
    v = _vehicle(request, pk)
    if not can_manage(request.user):
        raise Http404("not found")
    form = AdviceActionForm(request.POST)
    if form.is_valid():
        d = form.cleaned_data
        try:
            services.advice_act(user=request.user, vehicle=v, key=d["key"], action=d["action"],
                                scheduled_for=d.get("scheduled_for"), note=d.get("note") or "")
        except ValueError as exc:
            messages.error(request, str(exc))
        else:
            messages.success(request, f"Marked {d['action']}.")
    else:
        messages.error(request, "; ".join(e for errs in form.errors.values() for e in errs))
    return redirect("analytics:vehicle", pk=v.pk)


def _csv(v: Vehicle, advice, picture):
    rows = []
    for a in advice:
        rows.append(["advice", a.severity, a.corner, a.what, a.due_date, a.due_km,
                     a.body.get("limit"), " | ".join(a.body.get("why", [])),
                     a.body.get("model_version"), "", "", CAUTION])
    if picture:
        for g in picture["angles"]:
            e, fc = g["entry"], g["forecast"]
            rows.append(["drift", "", g["corner"], g["angle"], fc.get("likely_date"), fc.get("likely_km"),
                         (g["spec"] or {}).get("source"), fc.get("status"), e.get("slope_deg_per_10k"),
                         e.get("shrunk_slope_deg_per_10k"), "deg per 10,000 km", CAUTION])
        for load in picture["loads"]:
            for r in load["rows"]:
                rows.append(["load case", "", load["corner"], r["case"], "", "",
                             "; ".join(r["assumptions"]), "toe new/now",
                             r["toe_change_new_deg"], r["toe_change_measured_deg"], "deg", CAUTION])
    return csv_response(f"vehicle-{v.plate.replace(' ', '')}.csv",
                        ["section", "severity", "corner", "what", "due_date", "due_km", "limit_or_source",
                         "why_or_status", "value_1", "value_2", "unit", "caution"], rows)
