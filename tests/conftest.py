"""Shared fixtures: accounts per role, token clients, and a small invented catalogue.

The catalogue values that enter conversions are the published ones of
REFERENCES.md (Bessell, Castelli & Plez 1998 Table A2 for the Vega bands);
names and sites are invented.
"""

from __future__ import annotations

import io
from collections.abc import Callable
from typing import Any

import pytest
from astropy.utils import iers

iers.conf.auto_download = False
iers.conf.auto_max_age = None


@pytest.fixture(autouse=True)
def _fresh_cache() -> None:
    """Cached answers never cross tests (the cache outlives each test's transaction)."""
    from django.core.cache import cache

    cache.clear()


@pytest.fixture
def make_user(db: Any) -> Callable[..., Any]:
    from django.contrib.auth.models import Group, User

    def make(username: str, *groups: str, superuser: bool = False) -> User:
        if superuser:
            user = User.objects.create_superuser(username=username, password="pw-" + username)
        else:
            user = User.objects.create_user(username=username, password="pw-" + username)
        for g in groups:
            user.groups.add(Group.objects.get(name=g))
        return user

    return make


@pytest.fixture
def contributor(make_user: Callable[..., Any]) -> Any:
    return make_user("ada", "contributors")


@pytest.fixture
def other_contributor(make_user: Callable[..., Any]) -> Any:
    return make_user("bram", "contributors")


@pytest.fixture
def curator(make_user: Callable[..., Any]) -> Any:
    return make_user("cleo", "curators")


@pytest.fixture
def reader(make_user: Callable[..., Any]) -> Any:
    return make_user("dov")


@pytest.fixture
def superuser(make_user: Callable[..., Any]) -> Any:
    return make_user("root-admin", superuser=True)


@pytest.fixture
def client_for() -> Callable[[Any], Any]:
    from rest_framework.authtoken.models import Token
    from rest_framework.test import APIClient

    def make(user: Any | None) -> APIClient:
        c = APIClient()
        if user is not None:
            token, _ = Token.objects.get_or_create(user=user)
            c.credentials(HTTP_AUTHORIZATION=f"Token {token.key}")
        return c

    return make


@pytest.fixture
def catalogue(db: Any) -> dict[str, Any]:
    """An invented source, a ground and a space instrument, and bands of each kind."""
    from lcstore.models import Band, Instrument, Source

    src = Source.objects.create(
        slug="tarn-7",
        name="Tarn 7",
        aliases=["TRN J1000+2000"],
        ra=150.0,
        dec=20.0,
        redshift=0.3,
        ebv=0.1,
    )
    ground = Instrument.objects.create(
        slug="hollow-hill-1m",
        name="Hollow Hill 1.0 m",
        kind="ground",
        site_lon=-70.7,
        site_lat=-30.2,
        site_height=2200.0,
        default_time_format="jd",
        default_time_scale="utc",
        default_time_reference="TOPOCENTER",
    )
    space = Instrument.objects.create(
        slug="wren-lat",
        name="Wren gamma-ray imager",
        kind="space",
        default_time_format="met",
        default_time_scale="tt",
        default_time_reference="GEOCENTER",
        met_epoch=51910.0,
    )
    xray = Instrument.objects.create(
        slug="pika-xrt",
        name="Pika X-ray telescope",
        kind="space",
        default_time_format="mjd",
        default_time_scale="tt",
        default_time_reference="GEOCENTER",
    )
    # Vega zero points and effective wavelengths: Bessell, Castelli & Plez 1998, Table A2.
    v = Band.objects.create(
        slug="v",
        name="Johnson V",
        kind="flux_density",
        wavelength_eff=5450.0,
        mag_system="Vega",
        zero_point_jy=3636.0,
    )
    r = Band.objects.create(
        slug="r",
        name="Cousins R",
        kind="flux_density",
        wavelength_eff=6410.0,
        mag_system="Vega",
        zero_point_jy=3064.0,
    )
    gam = Band.objects.create(
        slug="gamma",
        name="gamma 0.1-300 GeV",
        kind="photon_flux",
        energy_min_kev=1e5,
        energy_max_kev=3e8,
        pivot_energy_kev=1e6,
        photon_index=2.4,
    )
    xr = Band.objects.create(
        slug="xray",
        name="X-ray 0.3-10 keV",
        kind="count_rate",
        energy_min_kev=0.3,
        energy_max_kev=10.0,
        photon_index=2.0,
        counts_to_energy_flux=4.0e-11,
    )
    return {
        "source": src,
        "ground": ground,
        "space": space,
        "xray_inst": xray,
        "v": v,
        "r": r,
        "gamma": gam,
        "xray": xr,
    }


@pytest.fixture
def upload_file() -> Callable[..., Any]:
    """POST a file to uploads/ the way a contributor's script does (multipart)."""

    def post(client: Any, content: bytes | str, name: str = "data.csv", **fields: Any) -> Any:
        if isinstance(content, str):
            content = content.encode()
        f = io.BytesIO(content)
        f.name = name
        return client.post("/api/v1/uploads/", {"file": f, **fields}, format="multipart")

    return post
