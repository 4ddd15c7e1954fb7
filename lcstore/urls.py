"""Top-level URLs: the API under /api/v1/ and the curation screens under /admin/."""

from django.contrib import admin
from django.urls import include, path

urlpatterns = [
    path("admin/", admin.site.urls),
    path("api/v1/", include("api.urls")),
    path("", include("web.urls")),
]
