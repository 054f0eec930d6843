"""The owner's PDF of service advice: rendered once per (result, paper), e-mailed once.

``owner_report_issue`` is what the ``make_owner_report`` job and the download link both call, so
the link always works and running the job twice writes one report and sends one e-mail.
The PDF is made with WeasyPrint from ``analytics/report.html``; the paper size is set by CSS
``@page { size: A4 }`` or ``Letter``. Charts are the same compact SVGs as on the pages (their
text stays text, so the PDF stays searchable). One report renders in about 0.3–0.5 s in a warm
process on a 2-core machine, nearly all of it WeasyPrint's layout and drawing.
"""
from __future__ import annotations

import logging

from django.conf import settings
from django.core.files.base import ContentFile
from django.core.mail import EmailMessage
from django.db import IntegrityError, transaction
from django.template.loader import render_to_string
from django.utils import timezone

from analytics.core.caution import CAUTION

from . import selectors
from .models import AdviceItem, AnalysisResult, OwnerReport

log = logging.getLogger(__name__)
PAPERS = {"A4": "A4", "Letter": "Letter"}


def _plain_summary(vehicle, items: list[AdviceItem]) -> str:
    """One plain-language paragraph: how many items, the most urgent and by when."""
    if not items:
        return (f"Nothing is due on {vehicle.plate} from the readings we hold. Keep to the "
                "manufacturer's service intervals.")
    counts = {s: sum(1 for i in items if i.severity == s) for s in ("now", "soon", "plan", "watch")}
    parts = [f"{n} to do {word}" for word, n in (("now", counts["now"]), ("soon", counts["soon"]),
                                                 ("when planned", counts["plan"])) if n]
    if counts["watch"]:
        parts.append(f"{counts['watch']} to keep an eye on")
    first = items[0]
    when = []
    if first.due_date:
        when.append(f"by {first.due_date:%-d %B %Y}")
    if first.due_km is not None:
        when.append(f"or {first.due_km:,} km, whichever comes first")
    return (f"We looked at every alignment reading and suspension check on record for "
            f"{vehicle.plate}. There {'is' if len(items) == 1 else 'are'} {len(items)} item"
            f"{'' if len(items) == 1 else 's'} of advice: {', '.join(parts)}. The most urgent: "
            f"{first.what.rstrip('.')} {' '.join(when)}.")


def owner_report_html(*, result: AnalysisResult, paper: str) -> str:
    vehicle = result.vehicle
    items = list(AdviceItem.objects.filter(result=result).order_by(
        "urgency_rank", "due_date", "id"))
    picture = selectors.vehicle_picture(vehicle, result)
    rear_loads = [x for x in picture["loads"] if x["corner"].startswith("R")] or picture["loads"]
    chosen_angles = _chosen_angles(picture["angles"], items)
    return render_to_string("analytics/report.html", {
        "vehicle": vehicle, "workshop": vehicle.workshop, "platform": vehicle.platform,
        "result": result, "paper": PAPERS[paper], "items": items, "CAUTION": CAUTION,
        "summary": _plain_summary(vehicle, items), "angles": chosen_angles,
        "loads": rear_loads[:2], **{k: picture[k] for k in (
            "demo", "spec_sources", "platform_sources", "assumptions", "today")},
        "made_at": timezone.now(),
    })


def _chosen_angles(angles: list[dict], items: list[AdviceItem]) -> list[dict]:
    """The history charts worth a page: angles forecast to leave their band first (at most 2)."""
    def soonest(a):
        fc = a["forecast"]
        return fc.get("early_km") if fc.get("early_km") is not None else float("inf")

    with_band = [a for a in angles if a["spec"] and a["entry"].get("trend")]
    return sorted(with_band, key=soonest)[:2]


def owner_report_pdf(*, result: AnalysisResult, paper: str) -> bytes:
    from weasyprint import HTML

    html = owner_report_html(result=result, paper=paper)
    return HTML(string=html, base_url=str(settings.BASE_DIR)).write_pdf()


def owner_report_get_or_make(*, result_id: int, paper: str = "A4") -> OwnerReport:
    """The report for (result, paper): the stored one, or rendered and stored now."""
    if paper not in PAPERS:
        raise ValueError("paper: must be 'A4' or 'Letter'")
    existing = OwnerReport.objects.filter(result_id=result_id, paper=paper).first()
    if existing is not None and existing.pdf:
        return existing
    result = AnalysisResult.objects.select_related(
        "vehicle", "vehicle__workshop", "vehicle__platform", "vehicle__owner").get(pk=result_id)
    pdf = owner_report_pdf(result=result, paper=paper)
    name = f"advice-{result.vehicle_id}-{result.pk}-{paper}.pdf"
    try:
        with transaction.atomic():
            report = OwnerReport(vehicle=result.vehicle, result=result, paper=paper)
            report.pdf.save(name, ContentFile(pdf), save=False)
            report.save()
    except IntegrityError:  # a concurrent run stored it first
        return OwnerReport.objects.get(result_id=result_id, paper=paper)
    return report


def owner_report_issue(*, result_id: int, paper: str = "A4", email: bool = True,
                       only_if_latest: bool = False) -> int | None:
    """Make (once) the owner PDF for a result and, if asked, e-mail it (once). Returns its id.

    ``only_if_latest``: make nothing (None) when the vehicle has a newer result — its own job
    sends that one (see ``analytics.services.owner_report_on_commit``)."""
    if only_if_latest:
        from .services import latest_result_id

        vehicle_id = AnalysisResult.objects.filter(pk=result_id).values_list(
            "vehicle_id", flat=True).first()
        if vehicle_id is None or latest_result_id(vehicle_id) != result_id:
            return None
    report = owner_report_get_or_make(result_id=result_id, paper=paper)
    if email:
        owner_report_email(report_id=report.pk)
    return report.pk


def owner_report_email(*, report_id: int) -> bool:
    """Send the report to the vehicle's owner unless already sent. True if sent now."""
    report = OwnerReport.objects.select_related("vehicle", "vehicle__owner",
                                                "vehicle__workshop").get(pk=report_id)
    owner = report.vehicle.owner
    if owner is None or not owner.email:
        return False
    # Claim the send first, so two runs at once cannot both send; give it back if sending fails.
    claimed = OwnerReport.objects.filter(pk=report.pk, emailed_at__isnull=True).update(
        emailed_at=timezone.now())
    if not claimed:
        return False
    vehicle, workshop = report.vehicle, report.vehicle.workshop
    body = render_to_string("analytics/report_email.txt", {
        "vehicle": vehicle, "workshop": workshop, "owner": owner, "CAUTION": CAUTION})
    message = EmailMessage(
        subject=f"Service advice for {vehicle.plate}", body=body,
        from_email=settings.DEFAULT_FROM_EMAIL, to=[owner.email],
        reply_to=[workshop.email] if workshop.email else None)
    try:
        with report.pdf.open("rb") as fh:
            message.attach(f"service-advice-{vehicle.plate.replace(' ', '')}.pdf", fh.read(),
                           "application/pdf")
        message.send()
    except Exception:
        OwnerReport.objects.filter(pk=report.pk).update(emailed_at=None)
        raise
    return True
