"""The manager's fleet view: what is due by urgency, drift-rate distributions, toe-out flips."""
from __future__ import annotations

from django import forms
from django.contrib.auth.decorators import login_required
from django.core.paginator import Paginator
from django.http import Http404
from django.shortcuts import render
from django.utils import timezone

from analytics import selectors
from analytics.core.advice import SEVERITIES
from analytics.core.caution import CAUTION
from fleetsvc.csvsafe import csv_response
from inspections.scoping import can_manage

PAGE = 25


class DueFilter(forms.Form):
    severity = forms.ChoiceField(choices=[("", "all")] + [(s, s) for s in SEVERITIES], required=False)
    overdue = forms.BooleanField(required=False)
    page = forms.IntegerField(min_value=1, required=False)
    flips_page = forms.IntegerField(min_value=1, required=False)
    show = forms.ChoiceField(choices=[("", "page"), ("due", "due"), ("rates", "rates"),
                                      ("flips", "flips")], required=False)


class CountedPaginator(Paginator):
    """A paginator told its length (counted already with the urgency tallies)."""

    def __init__(self, object_list, per_page, *, count: int) -> None:
        super().__init__(object_list, per_page)
        self._count = count

    @property
    def count(self) -> int:
        return self._count


def _filters(request) -> dict:
    form = DueFilter(request.GET)
    return form.cleaned_data if form.is_valid() else {}


@login_required
def fleet(request):
    if not can_manage(request.user):
        raise Http404("not found")
    f = _filters(request)
    due = selectors.due_advice(request.user, severity=f.get("severity") or None,
                               overdue_only=bool(f.get("overdue")))
    if request.GET.get("format") == "csv":
        return _csv(request, f.get("show") or "due", due,
                    selectors.toe_out_flips_export(request.user))
    counts = selectors.urgency_counts(request.user)
    page = CountedPaginator(due, PAGE, count=selectors.due_count(
        counts, severity=f.get("severity") or None, overdue_only=bool(f.get("overdue")))
    ).get_page(f.get("page") or 1)
    flips_page = Paginator(selectors.toe_out_flips(request.user), PAGE).get_page(
        f.get("flips_page") or 1)
    flips_page.object_list = selectors.with_flip_values(flips_page.object_list)
    return render(request, "analytics/fleet.html", {
        "counts": counts, "page": page, "flips": flips_page,
        "rates": selectors.drift_distribution(request.user), "filters": f,
        "severities": SEVERITIES, "today": timezone.localdate(),
        "query": request.GET.copy(),
    })


def _csv(request, show: str, due, flips):
    if show == "rates":
        rows = selectors.drift_distribution(request.user)
        return csv_response("fleet-drift-rates.csv",
                            ["platform", "corner", "angle", "vehicles", "lowest_deg_per_10k",
                             "highest_deg_per_10k", "pooled_mean_deg_per_10k", "pooled_se_deg_per_10k",
                             "between_vehicle_sd_deg_per_10k", "method", "caution"],
                            ([r["platform"], r["corner"], r["angle"], r["vehicles"], r["lo"], r["hi"],
                              r["pooled_mean"], r["pooled_se"], r["spread"], r["method"], CAUTION]
                             for r in rows))
    if show == "flips":
        return csv_response("fleet-toe-out-flips.csv",
                            ["plate", "vin", "platform", "RL_flips", "RL_new_deg", "RL_now_deg",
                             "RR_flips", "RR_new_deg", "RR_now_deg", "caution"],
                            ([r.vehicle.plate, r.vehicle.vin, r.vehicle.platform.name, r.rl_flip,
                              r.rl_new, r.rl_now, r.rr_flip, r.rr_new, r.rr_now, CAUTION]
                             for r in flips.iterator()))
    return csv_response("fleet-due.csv",
                        ["severity", "due_date", "due_km", "plate", "vin", "fleet_number", "corner",
                         "what", "limit", "defect_category", "model_version", "caution"],
                        ([a.severity, a.due_date, a.due_km, a.vehicle.plate, a.vehicle.vin,
                          a.vehicle.fleet_number, a.corner, a.what, a.body.get("limit"),
                          a.defect_category, a.body.get("model_version"), CAUTION]
                         for a in due.iterator(chunk_size=500)))
