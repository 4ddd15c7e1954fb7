"""Background jobs: POST answers 202 with a Location to poll; owner and curators see it."""

from __future__ import annotations

from typing import Any

from django.db import transaction
from django.shortcuts import get_object_or_404
from drf_spectacular.utils import extend_schema
from rest_framework import mixins, serializers, status, viewsets
from rest_framework.decorators import action
from rest_framework.exceptions import ValidationError
from rest_framework.request import Request
from rest_framework.response import Response

from api.throttles import ReadThrottle, WriteScopedThrottle
from api.views.analysis import CorrelationQuery, LagsQuery, lag_params
from lcstore import roles
from lcstore.jobs import JOB_KINDS, job_enqueue, jobs_sweep_stale
from lcstore.models import Job, JobState, Source

__all__ = ["JobViewSet"]


class JobSerializer(serializers.ModelSerializer):
    owner = serializers.CharField(source="owner.username", read_only=True)
    source = serializers.SlugRelatedField(slug_field="slug", read_only=True)
    url = serializers.SerializerMethodField()

    class Meta:
        model = Job
        fields = [
            "id",
            "url",
            "kind",
            "owner",
            "source",
            "parameters",
            "state",
            "progress",
            "result",
            "error",
            "attempts",
            "created_at",
            "started_at",
            "finished_at",
        ]
        read_only_fields = fields

    def get_url(self, obj: Job) -> str:
        return f"/api/v1/jobs/{obj.pk}/"


class JobInput(serializers.Serializer):
    kind = serializers.ChoiceField(choices=JOB_KINDS)
    source = serializers.SlugField()
    parameters = serializers.DictField(
        required=False,
        default=dict,
        help_text="the query parameters of the synchronous request (lags/ or correlation/)",
    )


def _job_parameters(kind: str, raw: dict[str, Any]) -> dict[str, Any]:
    data = {k: v for k, v in raw.items() if v is not None}
    if kind == "lags":
        q = LagsQuery(data=data)
        q.is_valid(raise_exception=True)
        d = q.validated_data
        params = lag_params(d).__dict__ | {"x": d["x"], "y": d["y"]}
    else:
        q = CorrelationQuery(data=data)
        q.is_valid(raise_exception=True)
        d = q.validated_data
        params = {k: d.get(k) for k in ("x", "y", "bin", "max_separation", "n_boot", "seed")}
    if d.get("as_of"):
        params["as_of"] = d["as_of"].isoformat()
    return params


class JobViewSet(mixins.ListModelMixin, mixins.RetrieveModelMixin, viewsets.GenericViewSet):
    serializer_class = JobSerializer
    throttle_classes = [ReadThrottle, WriteScopedThrottle]
    throttle_scope = "heavy"

    def get_queryset(self):  # type: ignore[no-untyped-def]
        qs = Job.objects.select_related("owner", "source")
        user = self.request.user
        if not user.is_authenticated:
            return qs.none()
        return qs if roles.is_curator(user) else qs.filter(owner=user)

    def get_permissions(self):  # type: ignore[no-untyped-def]
        from rest_framework.permissions import IsAuthenticated

        return [IsAuthenticated()]

    def get_object(self):  # type: ignore[no-untyped-def]
        # A job whose worker stopped shows as failed (and can be retried), not running for ever.
        job = super().get_object()
        if job.state == JobState.RUNNING and jobs_sweep_stale(ids=[job.pk]):
            job.refresh_from_db()
        return job

    def list(self, request: Request, *args: Any, **kwargs: Any) -> Response:
        jobs_sweep_stale(
            ids=self.get_queryset().filter(state=JobState.RUNNING).values_list("pk", flat=True)
        )
        return super().list(request, *args, **kwargs)

    @extend_schema(request=JobInput, responses={202: JobSerializer})
    def create(self, request: Request, *args: Any, **kwargs: Any) -> Response:
        inp = JobInput(data=request.data)
        inp.is_valid(raise_exception=True)
        source = get_object_or_404(Source, slug=inp.validated_data["source"])
        try:
            params = _job_parameters(inp.validated_data["kind"], inp.validated_data["parameters"])
        except ValidationError as exc:
            raise ValidationError({"parameters": exc.detail}) from None
        with transaction.atomic():
            job = Job.objects.create(
                kind=inp.validated_data["kind"],
                owner=request.user,
                source=source,
                parameters=params,
            )
            job_enqueue(job)
        job.refresh_from_db()
        return Response(
            JobSerializer(job).data,
            status=status.HTTP_202_ACCEPTED,
            headers={"Location": f"/api/v1/jobs/{job.pk}/"},
        )

    @extend_schema(request=None, responses={202: JobSerializer})
    @action(detail=True, methods=["post"])
    def retry(self, request: Request, pk: str | None = None) -> Response:
        job = self.get_object()
        if job.state != JobState.FAILED:
            raise ValidationError({"detail": f"job is {job.state}; only a failed job is retried"})
        with transaction.atomic():
            Job.objects.filter(pk=job.pk).update(
                state=JobState.QUEUED, progress=0.0, error="", finished_at=None
            )
            job_enqueue(job)
        job.refresh_from_db()
        return Response(
            JobSerializer(job).data,
            status=status.HTTP_202_ACCEPTED,
            headers={"Location": f"/api/v1/jobs/{job.pk}/"},
        )
