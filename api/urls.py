"""The /api/v1/ routes (DESIGN.md §4)."""

from django.urls import include, path
from drf_spectacular.views import SpectacularAPIView, SpectacularRedocView
from rest_framework.routers import DefaultRouter

from api.views.analysis import CorrelationView, LagsView, SedView, VariabilityView
from api.views.catalogue import (
    BandViewSet,
    CalibrationOffsetViewSet,
    HostFluxViewSet,
    InstrumentViewSet,
    SourceViewSet,
)
from api.views.curves import LightcurveView
from api.views.jobs import JobViewSet
from api.views.uploads import UploadViewSet

router = DefaultRouter()
router.register("sources", SourceViewSet, basename="source")
router.register("instruments", InstrumentViewSet, basename="instrument")
router.register("bands", BandViewSet, basename="band")
router.register("calibration-offsets", CalibrationOffsetViewSet, basename="calibration-offset")
router.register("host-fluxes", HostFluxViewSet, basename="host-flux")
router.register("uploads", UploadViewSet, basename="upload")
router.register("jobs", JobViewSet, basename="job")

urlpatterns = [
    path("sources/<slug:slug>/lightcurve/", LightcurveView.as_view(), name="lightcurve"),
    path("sources/<slug:slug>/correlation/", CorrelationView.as_view(), name="correlation"),
    path("sources/<slug:slug>/lags/", LagsView.as_view(), name="lags"),
    path("sources/<slug:slug>/variability/", VariabilityView.as_view(), name="variability"),
    path("sources/<slug:slug>/sed/", SedView.as_view(), name="sed"),
    path("schema/", SpectacularAPIView.as_view(), name="schema"),
    path("docs/", SpectacularRedocView.as_view(url_name="schema"), name="docs"),
    path("", include(router.urls)),
]
