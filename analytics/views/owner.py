"""The owner's page and the PDF download (made now through the same service if not made yet)."""
from __future__ import annotations

from django import forms
from django.contrib.auth.decorators import login_required
from django.core.paginator import Paginator
from django.http import FileResponse, Http404
from django.shortcuts import render

from analytics import reports, services
from analytics.models import AdviceItem
from inspections.models import Vehicle
from inspections.models.org import Role
from inspections.scoping import get_visible_or_404, role_of


class PaperForm(forms.Form):
    paper = forms.ChoiceField(choices=[("A4", "A4"), ("Letter", "Letter")], required=False)


@login_required
def mine(request):
    if role_of(request.user) != Role.OWNER:
        raise Http404("not found")
    vehicles = (Vehicle.objects.visible_to(request.user).select_related("platform", "workshop")
                .order_by("plate"))
    page = Paginator(vehicles, 10).get_page(request.GET.get("page") or 1)
    advice = {}
    for a in AdviceItem.objects.filter(vehicle__in=list(page)).order_by("urgency_rank", "due_date", "id"):
        advice.setdefault(a.vehicle_id, []).append(a)
    return render(request, "analytics/mine.html", {
        "page": page, "rows": [{"v": v, "advice": advice.get(v.pk, [])} for v in page]})


@login_required
def advice_pdf(request, pk: int):
    vehicle = get_visible_or_404(Vehicle.objects.all(), request.user, prefix="", pk=pk)
    form = PaperForm(request.GET)
    if not form.is_valid():
        raise Http404("paper: A4 or Letter")
    paper = form.cleaned_data.get("paper") or "A4"
    result = services.latest_result(vehicle) or services.vehicle_analyse(vehicle_id=vehicle.pk)
    report = reports.owner_report_get_or_make(result_id=result.pk, paper=paper)
    return FileResponse(report.pdf.open("rb"), content_type="application/pdf",
                        filename=f"service-advice-{vehicle.plate.replace(' ', '')}-{paper}.pdf")
