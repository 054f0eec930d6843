"""Routes of records beyond the bay (mounted at /records/): CSV import, CSV history, audit history."""
from django.urls import path

from .views import records

app_name = "records"
urlpatterns = [
    path("import/", records.records_import, name="import"),
    path("import/layout.csv", records.import_layout_csv, name="import_layout"),
    path("vehicles/<int:pk>/history.csv", records.vehicle_history_csv, name="vehicle_history_csv"),
    path("vehicles/<int:pk>/audit/", records.vehicle_audit, name="vehicle_audit"),
]
