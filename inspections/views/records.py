"""Record pages beyond the bay: CSV import, a vehicle's history as CSV, a vehicle's audit history.

Access: the import page is for those who may import (``importing.can_import``: technicians,
workshop managers, administrators); the history CSV for anyone who may see the vehicle; the audit
history for managers and administrators who may see it. Anything else answers 404.
"""
from __future__ import annotations

from django.contrib.auth.decorators import login_required
from django.http import Http404
from django.shortcuts import render
from django.views.decorators.http import require_GET, require_http_methods

from fleetsvc.csvsafe import csv_response
from inspections import audit, exporting, importing
from inspections.models import Vehicle
from inspections.records_forms import ImportForm
from inspections.scoping import can_manage, get_visible_or_404


@login_required
@require_http_methods(["GET", "POST"])
def records_import(request):
    """Upload a CSV file of sessions and checks; all or nothing, problems listed by row and column."""
    if not importing.can_import(request.user):
        raise Http404("not found")
    context = {"columns": importing.COLUMNS, "max_rows": importing.PAGE_MAX_ROWS,
               "max_mb": importing.MAX_FILE_BYTES // (1024 * 1024)}
    if request.method == "GET":
        return render(request, "inspections/records/import.html", {**context, "form": ImportForm()})
    form = ImportForm(request.POST, request.FILES)
    if not form.is_valid():
        return render(request, "inspections/records/import.html", {**context, "form": form},
                      status=400)
    try:
        result = importing.import_records(data=form.cleaned_data["file"].read(),
                                          filename=form.filename(), user=request.user,
                                          dry_run=form.cleaned_data["check_only"],
                                          max_rows=importing.PAGE_MAX_ROWS)
    except importing.ImportRefused as exc:
        return render(request, "inspections/records/import.html",
                      {**context, "form": form, "refused": exc, "filename": form.filename()},
                      status=400)
    return render(request, "inspections/records/import.html",
                  {**context, "form": ImportForm(), "result": result, "filename": form.filename()})


@login_required
@require_GET
def import_layout_csv(request):
    """The import layout's header row, to start a file from."""
    if not importing.can_import(request.user):
        raise Http404("not found")
    return csv_response("fleetsvc-import-layout.csv", importing.COLUMNS, [])


@login_required
@require_GET
def vehicle_history_csv(request, pk: int):
    """Every session's readings and every check of a vehicle, superseded ones included."""
    vehicle = get_visible_or_404(Vehicle.objects.select_related("workshop"), request.user,
                                 prefix="", pk=pk)
    return csv_response(f"{vehicle.plate}-history.csv", exporting.HEADER,
                        exporting.history_rows(vehicle))


@login_required
@require_GET
def vehicle_audit(request, pk: int):
    """Originals and corrections side by side, with who, when and why; every audit entry."""
    if not can_manage(request.user):
        raise Http404("not found")
    vehicle = get_visible_or_404(Vehicle.objects.select_related("workshop", "platform"),
                                 request.user, prefix="", pk=pk)
    return render(request, "inspections/records/audit.html",
                  {"vehicle": vehicle, **audit.vehicle_history(vehicle)})
