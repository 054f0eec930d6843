"""URL routes of fleetsvc."""
from django.contrib import admin
from django.contrib.auth import views as auth_views
from django.urls import include, path

urlpatterns = [
    path("admin/", admin.site.urls),
    path("signin/", auth_views.LoginView.as_view(template_name="signin.html"), name="login"),
    path("signout/", auth_views.LogoutView.as_view(), name="logout"),
    path("", include("inspections.urls")),
    path("analysis/", include("analytics.urls")),
    path("records/", include("inspections.records_urls")),
    path("api/", include("api.urls")),
]
