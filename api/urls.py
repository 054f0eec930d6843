"""Routes of the API, under ``/api/``: version 1 and the OpenAPI schema."""
from django.urls import path
from drf_spectacular.views import SpectacularAPIView

from . import views

app_name = "api"

urlpatterns = [
    path("schema/", SpectacularAPIView.as_view(), name="schema"),
    path("v1/token", views.ObtainToken.as_view(), name="token"),
    path("v1/vehicles", views.VehicleList.as_view(), name="vehicle-list"),
    path("v1/vehicles/<int:pk>", views.VehicleDetail.as_view(), name="vehicle-detail"),
    path("v1/vehicles/<int:pk>/sessions", views.VehicleSessions.as_view(), name="vehicle-sessions"),
    path("v1/vehicles/<int:pk>/checks", views.VehicleChecks.as_view(), name="vehicle-checks"),
    path("v1/vehicles/<int:pk>/advice", views.VehicleAdvice.as_view(), name="vehicle-advice"),
    path("v1/sessions/<int:pk>", views.SessionDetail.as_view(), name="session-detail"),
    path("v1/sessions/<int:pk>/corrections", views.SessionCorrections.as_view(),
         name="session-corrections"),
    path("v1/checks/<int:pk>", views.CheckDetail.as_view(), name="check-detail"),
]
