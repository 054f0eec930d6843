"""Routes of the technician's bay. Names are global (no namespace): ``LOGIN_REDIRECT_URL = "home"``."""
from django.urls import path

from . import views

urlpatterns = [
    path("", views.home, name="home"),
    path("bay/", views.bay, name="bay"),
    path("bay/sw.js", views.service_worker, name="bay_service_worker"),
    path("bay/vehicles/<int:pk>/", views.bay_vehicle, name="bay_vehicle"),
    path("bay/vehicles/<int:pk>/sessions/new", views.session_new, name="bay_session_new"),
    path("bay/vehicles/<int:pk>/sessions/submit", views.session_submit, name="bay_session_submit"),
    path("bay/sessions/<int:pk>/", views.session_detail, name="bay_session"),
    path("bay/sessions/<int:pk>/correct", views.session_correction, name="bay_session_correction"),
    path("bay/sessions/<int:pk>/correct/submit", views.session_correct,
         name="bay_session_correct_submit"),
]
