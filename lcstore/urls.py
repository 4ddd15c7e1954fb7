"""Top-level URLs: the API under /api/v1/ and the curation screens under /admin/."""

from django.contrib import admin
from django.urls import include, path

handler400 = "api.errors.bad_request"
handler404 = "api.errors.not_found"
handler500 = "api.errors.server_error"

urlpatterns = [
    path("admin/", admin.site.urls),
    path("api/v1/", include("api.urls")),
    path("", include("web.urls")),
]
