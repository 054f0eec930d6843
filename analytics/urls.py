"""Routes of the manager's and owner's pages (namespace ``analytics``, mounted at /analysis/)."""
from django.urls import path

from . import views

app_name = "analytics"
urlpatterns = [
    path("fleet/", views.fleet, name="fleet"),
    path("vehicles/<int:pk>/", views.vehicle, name="vehicle"),
    path("vehicles/<int:pk>/advice/act", views.advice_action, name="advice_action"),
    path("vehicles/<int:pk>/advice.pdf", views.advice_pdf, name="advice_pdf"),
    path("mine/", views.mine, name="mine"),
]
