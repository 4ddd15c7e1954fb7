"""The catalogue and the point store.

Canonical storage (DESIGN.md §3): every point's time is MJD in TDB at the
solar-system barycentre (BJD_TDB − 2400000.5); its value and error are in the
band kind's canonical unit (mJy, erg cm^-2 s^-1, ph cm^-2 s^-1 or ct s^-1).
What was uploaded (value, error, unit, time and its system) is kept beside it,
and the original file is kept by checksum, so nothing is ever lost.
"""

from __future__ import annotations

import uuid
import zlib
from typing import Any

from django.conf import settings
from django.core.exceptions import ValidationError
from django.db import models
from django.db.models import Q
from django.utils import timezone
from simple_history.models import HistoricalRecords

from lcstore.science.times import TIME_FORMATS, TIME_REFERENCES, TIME_SCALES
from lcstore.science.units import BandSpec

__all__ = [
    "BAND_FIELDS",
    "INSTRUMENT_FIELDS",
    "SOURCE_FIELDS",
    "Band",
    "BandKind",
    "CalibrationOffset",
    "FluxPoint",
    "HostFlux",
    "Instrument",
    "InstrumentKind",
    "Job",
    "JobState",
    "MagSystem",
    "Source",
    "StoredFile",
    "Upload",
    "UploadStatus",
]

# The curated fields of each record as DESIGN.md §4 lists them (after the slug);
# the API, the admin and the demo loader all use these lists.
SOURCE_FIELDS = ("name", "aliases", "ra", "dec", "redshift", "ebv", "notes")
INSTRUMENT_FIELDS = (
    "name",
    "kind",
    "site_lon",
    "site_lat",
    "site_height",
    "default_time_format",
    "default_time_scale",
    "default_time_reference",
    "met_epoch",
)
#: The curated fields that enter a conversion of uploaded points: recorded in each
#: upload's metadata snapshot (lcstore.services) and re-derived when they change
#: (lcstore.rederive).
BAND_CONVERSION_FIELDS = (
    "kind",
    "wavelength_eff",
    "mag_system",
    "zero_point_jy",
    "energy_min_kev",
    "energy_max_kev",
    "pivot_energy_kev",
    "photon_index",
    "counts_to_energy_flux",
)
INSTRUMENT_CONVERSION_FIELDS = (
    "site_lon",
    "site_lat",
    "site_height",
    "kind",
    "met_epoch",
    "default_time_format",
    "default_time_scale",
    "default_time_reference",
)
SOURCE_CONVERSION_FIELDS = ("ra", "dec")
BAND_FIELDS = ("name", *BAND_CONVERSION_FIELDS)

TimeFormat = models.TextChoices("TimeFormat", [(f.upper(), f) for f in TIME_FORMATS])
TimeScale = models.TextChoices("TimeScale", [(s.upper(), s) for s in TIME_SCALES])
TimeReference = models.TextChoices("TimeReference", [(r, r) for r in TIME_REFERENCES])


class Source(models.Model):
    """An astronomical source: position (ICRS), redshift and Galactic reddening."""

    slug = models.SlugField(max_length=80, unique=True)
    name = models.CharField(max_length=200)
    aliases = models.JSONField(default=list, blank=True)
    ra = models.FloatField(help_text="Right ascension, degrees (ICRS)")
    dec = models.FloatField(help_text="Declination, degrees (ICRS)")
    redshift = models.FloatField(null=True, blank=True)
    ebv = models.FloatField(default=0.0, help_text="Galactic E(B-V), mag")
    notes = models.TextField(blank=True)
    created_at = models.DateTimeField(auto_now_add=True)
    updated_at = models.DateTimeField(auto_now=True)
    history = HistoricalRecords()

    class Meta:
        ordering = ["slug"]
        constraints = [
            models.CheckConstraint(condition=Q(ra__gte=0) & Q(ra__lt=360), name="source_ra_range"),
            models.CheckConstraint(
                condition=Q(dec__gte=-90) & Q(dec__lte=90), name="source_dec_range"
            ),
            models.CheckConstraint(condition=Q(ebv__gte=0), name="source_ebv_nonnegative"),
        ]

    def __str__(self) -> str:
        return self.name

    def clean(self) -> None:
        if not isinstance(self.aliases, list) or not all(isinstance(a, str) for a in self.aliases):
            raise ValidationError({"aliases": "aliases must be a list of names"})
        if self.redshift is not None and self.redshift < 0:
            raise ValidationError({"redshift": "redshift cannot be negative"})


class InstrumentKind(models.TextChoices):
    GROUND = "ground"
    SPACE = "space"


class Instrument(models.Model):
    """A telescope/instrument with its site and the time system its files use."""

    slug = models.SlugField(max_length=80, unique=True)
    name = models.CharField(max_length=200)
    kind = models.CharField(max_length=10, choices=InstrumentKind.choices)
    site_lon = models.FloatField(null=True, blank=True, help_text="degrees east, geodetic")
    site_lat = models.FloatField(null=True, blank=True, help_text="degrees, geodetic")
    site_height = models.FloatField(null=True, blank=True, help_text="metres")
    default_time_format = models.CharField(max_length=12, choices=TimeFormat.choices, default="mjd")
    default_time_scale = models.CharField(max_length=4, choices=TimeScale.choices, default="utc")
    default_time_reference = models.CharField(
        max_length=12, choices=TimeReference.choices, default="TOPOCENTER"
    )
    met_epoch = models.FloatField(
        null=True, blank=True, help_text="MJD of MET zero, in the default time scale"
    )
    notes = models.TextField(blank=True)
    history = HistoricalRecords()

    class Meta:
        ordering = ["slug"]

    def __str__(self) -> str:
        return self.name

    def clean(self) -> None:
        errors: dict[str, str] = {}
        if self.kind == InstrumentKind.GROUND:
            for f in ("site_lon", "site_lat", "site_height"):
                if getattr(self, f) is None:
                    errors[f] = "a ground instrument needs its site (longitude, latitude, height)"
        if self.site_lat is not None and not -90 <= self.site_lat <= 90:
            errors["site_lat"] = "latitude must be within -90..90 degrees"
        if self.site_lon is not None and not -180 <= self.site_lon <= 360:
            errors["site_lon"] = "longitude must be within -180..360 degrees"
        if self.default_time_format == "met" and self.met_epoch is None:
            errors["met_epoch"] = "an instrument whose default time format is met needs met_epoch"
        if errors:
            raise ValidationError(errors)

    @property
    def site(self) -> tuple[float, float, float] | None:
        """Geodetic (lon°, lat°, height m), or None for a space instrument (geocentre)."""
        if self.kind == InstrumentKind.SPACE or self.site_lon is None or self.site_lat is None:
            return None
        return (self.site_lon, self.site_lat, self.site_height or 0.0)


class BandKind(models.TextChoices):
    FLUX_DENSITY = "flux_density"
    ENERGY_FLUX = "energy_flux"
    PHOTON_FLUX = "photon_flux"
    COUNT_RATE = "count_rate"


class MagSystem(models.TextChoices):
    NONE = "", "none"
    AB = "AB"
    VEGA = "Vega"


class Band(models.Model):
    """A photometric band or an energy range, with what makes its numbers comparable."""

    slug = models.SlugField(max_length=80, unique=True)
    name = models.CharField(max_length=200)
    kind = models.CharField(max_length=16, choices=BandKind.choices)
    wavelength_eff = models.FloatField(null=True, blank=True, help_text="Angstrom")
    mag_system = models.CharField(max_length=4, choices=MagSystem.choices, blank=True, default="")
    zero_point_jy = models.FloatField(
        null=True, blank=True, help_text="flux density of magnitude 0, Jy"
    )
    energy_min_kev = models.FloatField(null=True, blank=True)
    energy_max_kev = models.FloatField(null=True, blank=True)
    pivot_energy_kev = models.FloatField(
        null=True, blank=True, help_text="default: geometric mean of the range"
    )
    photon_index = models.FloatField(null=True, blank=True)
    counts_to_energy_flux = models.FloatField(
        null=True, blank=True, help_text="erg cm^-2 s^-1 per ct s^-1"
    )
    history = HistoricalRecords()

    class Meta:
        ordering = ["slug"]

    def __str__(self) -> str:
        return self.name

    def clean(self) -> None:
        errors: dict[str, str] = {}
        positive = (
            "wavelength_eff",
            "zero_point_jy",
            "energy_min_kev",
            "energy_max_kev",
            "pivot_energy_kev",
            "counts_to_energy_flux",
        )
        for f in positive:
            v = getattr(self, f)
            if v is not None and not v > 0:
                errors[f] = "must be positive"
        if self.kind == BandKind.FLUX_DENSITY:
            if self.wavelength_eff is None:
                errors["wavelength_eff"] = "a flux-density band needs its effective wavelength"
            if self.mag_system == MagSystem.VEGA and self.zero_point_jy is None:
                errors["zero_point_jy"] = "a Vega-system band needs its zero point (Jy)"
        else:
            if self.mag_system:
                errors["mag_system"] = "only flux-density bands have a magnitude system"
        if self.kind in (BandKind.ENERGY_FLUX, BandKind.PHOTON_FLUX):
            if self.energy_min_kev is None or self.energy_max_kev is None:
                errors["energy_min_kev"] = "an energy band needs its energy range (keV)"
        if (
            self.energy_min_kev is not None
            and self.energy_max_kev is not None
            and not self.energy_min_kev < self.energy_max_kev
        ):
            errors["energy_max_kev"] = "energy_max_kev must exceed energy_min_kev"
        if errors:
            raise ValidationError(errors)

    def spec(self) -> BandSpec:
        """The band as the science layer sees it."""
        return BandSpec(
            slug=self.slug,
            kind=self.kind,
            wavelength_eff_aa=self.wavelength_eff,
            mag_system=self.mag_system or "",
            zero_point_jy=self.zero_point_jy,
            energy_min_kev=self.energy_min_kev,
            energy_max_kev=self.energy_max_kev,
            pivot_energy_kev=self.pivot_energy_kev,
            photon_index=self.photon_index,
            counts_to_energy_flux=self.counts_to_energy_flux,
        )


class CalibrationOffset(models.Model):
    """Multiplicative inter-calibration of an instrument in a band, applied at query time."""

    instrument = models.ForeignKey(Instrument, on_delete=models.PROTECT)
    band = models.ForeignKey(Band, on_delete=models.PROTECT)
    factor = models.FloatField()
    notes = models.TextField(blank=True)
    history = HistoricalRecords()

    class Meta:
        ordering = ["instrument__slug", "band__slug"]
        constraints = [
            models.UniqueConstraint(fields=["instrument", "band"], name="one_offset_per_pair"),
            models.CheckConstraint(condition=Q(factor__gt=0), name="offset_factor_positive"),
        ]

    def __str__(self) -> str:
        return f"{self.instrument.slug}/{self.band.slug} × {self.factor}"


class HostFlux(models.Model):
    """Host-galaxy flux of a source in a band (canonical unit), subtracted on request."""

    source = models.ForeignKey(Source, on_delete=models.PROTECT, related_name="host_fluxes")
    band = models.ForeignKey(Band, on_delete=models.PROTECT)
    value = models.FloatField(help_text="in the band's canonical unit (mJy for flux density)")
    error = models.FloatField(null=True, blank=True)
    reference = models.TextField(blank=True)
    history = HistoricalRecords()

    class Meta:
        constraints = [
            models.UniqueConstraint(fields=["source", "band"], name="one_host_flux_per_band"),
        ]


class StoredFile(models.Model):
    """An uploaded file's bytes, addressed by their SHA-256.

    ``content`` holds the bytes as sent (``encoding`` empty) or a zlib stream of
    them (``encoding`` "zlib", RFC 1950); ``sha256`` and ``size`` are those of the
    bytes as sent, which :meth:`original` gives back either way.
    """

    sha256 = models.CharField(max_length=64, primary_key=True)
    size = models.BigIntegerField()
    content = models.BinaryField()
    encoding = models.CharField(max_length=16, blank=True, default="")
    created_at = models.DateTimeField(default=timezone.now)

    def original(self) -> bytes:
        """The file's bytes as they were sent."""
        content = bytes(self.content)
        if self.encoding == "zlib":
            return zlib.decompress(content)
        if self.encoding:
            raise ValueError(f"stored file {self.sha256}: unknown encoding {self.encoding!r}")
        return content


class UploadStatus(models.TextChoices):
    ACCEPTED = "accepted"
    SUPERSEDED = "superseded"
    RETRACTED = "retracted"


class Upload(models.Model):
    """One accepted file with its full provenance and every conversion parameter used."""

    uploader = models.ForeignKey(
        settings.AUTH_USER_MODEL, on_delete=models.PROTECT, related_name="uploads"
    )
    created_at = models.DateTimeField(default=timezone.now, db_index=True)
    file = models.ForeignKey(StoredFile, on_delete=models.PROTECT, related_name="uploads")
    file_name = models.CharField(max_length=255)
    format = models.CharField(max_length=10)
    source = models.ForeignKey(
        Source, null=True, blank=True, on_delete=models.PROTECT, related_name="+"
    )
    sources = models.ManyToManyField(Source, related_name="uploads")
    band = models.ForeignKey(Band, null=True, blank=True, on_delete=models.PROTECT)
    instrument = models.ForeignKey(Instrument, on_delete=models.PROTECT)
    columns = models.JSONField(default=dict)
    value_unit = models.CharField(max_length=80, blank=True)
    time_format = models.CharField(max_length=12)
    time_scale = models.CharField(max_length=4)
    time_reference = models.CharField(max_length=12)
    met_epoch = models.FloatField(null=True, blank=True)
    parameters = models.JSONField(
        default=dict, help_text="every conversion parameter and metadata value used"
    )
    reduction = models.TextField(blank=True)
    reference = models.TextField(blank=True)
    embargo_until = models.DateTimeField(null=True, blank=True)
    status = models.CharField(
        max_length=10, choices=UploadStatus.choices, default=UploadStatus.ACCEPTED
    )
    supersedes = models.ForeignKey(
        "self", null=True, blank=True, on_delete=models.PROTECT, related_name="superseded_by"
    )
    superseded_at = models.DateTimeField(null=True, blank=True)
    retracted_at = models.DateTimeField(null=True, blank=True)
    retracted_by = models.ForeignKey(
        settings.AUTH_USER_MODEL,
        null=True,
        blank=True,
        on_delete=models.PROTECT,
        related_name="+",
    )
    retraction_reason = models.TextField(blank=True)
    n_rows = models.IntegerField(default=0)
    n_points = models.IntegerField(default=0)
    n_upper_limits = models.IntegerField(default=0)
    time_min = models.FloatField(null=True, blank=True, help_text="MJD TDB")
    time_max = models.FloatField(null=True, blank=True, help_text="MJD TDB")
    warnings = models.JSONField(default=list)

    class Meta:
        ordering = ["-created_at", "-id"]
        indexes = [models.Index(fields=["file", "status"])]

    def __str__(self) -> str:
        return f"upload {self.pk} ({self.file_name})"

    def visible_at(self, when: Any) -> bool:
        """Whether the upload was part of the store at instant ``when``."""
        return (
            self.created_at <= when
            and (self.retracted_at is None or self.retracted_at > when)
            and (self.superseded_at is None or self.superseded_at > when)
        )


class FluxPoint(models.Model):
    """One measurement in canonical form, with what was uploaded kept beside it.

    Every index leads with the source so the table can be partitioned or
    sharded by source (DESIGN.md §3).
    """

    id = models.BigAutoField(primary_key=True)
    # No database constraint on these four keys: PostgreSQL checks a foreign key
    # row by row at commit, which cost more than the COPY of the points itself.
    # lcstore.ingest.load checks (and locks) the distinct ids of a load against
    # the catalogue before the COPY; PROTECT still guards deletes in the ORM
    # (DEVELOPERS.md, "Point table integrity").
    source = models.ForeignKey(
        Source, on_delete=models.PROTECT, db_index=False, db_constraint=False
    )
    band = models.ForeignKey(Band, on_delete=models.PROTECT, db_index=False, db_constraint=False)
    instrument = models.ForeignKey(
        Instrument, on_delete=models.PROTECT, db_index=False, db_constraint=False
    )
    upload = models.ForeignKey(
        Upload, on_delete=models.PROTECT, db_index=False, db_constraint=False
    )
    t = models.FloatField(help_text="MJD (TDB) at the solar-system barycentre")
    value = models.FloatField(help_text="canonical unit of the band kind")
    error = models.FloatField(null=True)
    upper_limit = models.BooleanField(default=False)
    time_error = models.FloatField(null=True, help_text="days")
    time_orig = models.FloatField(
        help_text="time as uploaded (for isot: MJD in the uploaded scale, no light-time change)"
    )
    value_orig = models.FloatField()
    error_orig = models.FloatField(null=True)

    class Meta:
        indexes = [
            models.Index(
                fields=["source", "band", "t"],
                include=["value", "error", "upper_limit", "upload", "instrument"],
                name="point_source_band_t",
            ),
            models.Index(fields=["source", "upload"], name="point_source_upload"),
        ]


class JobState(models.TextChoices):
    QUEUED = "queued"
    RUNNING = "running"
    DONE = "done"
    FAILED = "failed"


class Job(models.Model):
    """A background computation (large simulations): state, progress, result or error."""

    id = models.UUIDField(primary_key=True, default=uuid.uuid4, editable=False)
    kind = models.CharField(max_length=20)
    owner = models.ForeignKey(settings.AUTH_USER_MODEL, on_delete=models.PROTECT)
    source = models.ForeignKey(Source, on_delete=models.PROTECT)
    parameters = models.JSONField(default=dict)
    state = models.CharField(max_length=10, choices=JobState.choices, default=JobState.QUEUED)
    progress = models.FloatField(default=0.0)
    result = models.JSONField(null=True, blank=True)
    error = models.TextField(blank=True)
    attempts = models.IntegerField(default=0)
    task_id = models.CharField(max_length=64, blank=True)
    created_at = models.DateTimeField(default=timezone.now)
    started_at = models.DateTimeField(null=True, blank=True)
    finished_at = models.DateTimeField(null=True, blank=True)

    class Meta:
        ordering = ["-created_at"]
