"""schemathesis against the served OpenAPI document, on a live server: no 5xx, no drift.

Every operation of /api/v1/schema/ gets a fixed number of generated requests
(positive data from the schema; derandomized, so the run is the same every
time), sent over HTTP to pytest-django's live server with a curator's token.
Each answer must pass schemathesis' ``not_a_server_error`` and
``response_schema_conformance`` checks. Anchors: OWASP API Security Top 10 2023
API8 (security misconfiguration: a 5xx is one) and API9 (improper inventory
management: the published schema must describe what the service answers).

The live server shares the test database through committed data, so this test
runs in a transactional database; ``serialized_rollback`` restores the rows
the migrations create (the role groups) for the tests that come after.
"""

from __future__ import annotations

from collections import Counter
from typing import Any

import numpy as np
import pytest
import schemathesis
from hypothesis import HealthCheck, Phase, given, settings
from hypothesis import strategies as st
from schemathesis.checks import not_a_server_error
from schemathesis.specs.openapi.checks import response_schema_conformance

EXAMPLES_PER_OPERATION = 6  # 44 operations: about 260 requests in all

# Failures found by this test whose fix lies outside the files the fuzzing work may
# change. Each is reported, and must still occur (strict, like xfail): drop its entry
# with the fix. Keys: (operation, status, a phrase of the failure).
KNOWN_FAILURES: dict[tuple[str, int, str], str] = {}
BARY = dict(time_format="mjd", time_scale="tdb", time_reference="BARYCENTER")


@pytest.fixture
def seeded(catalogue: Any, contributor: Any, curator: Any) -> dict[str, Any]:
    """The catalogue plus an R-band and a gamma-ray upload of 20 points, and a curator token."""
    from rest_framework.authtoken.models import Token

    from lcstore.models import Job
    from lcstore.services import UploadParams, upload_create

    t = 60000.0 + np.arange(20)
    uploads = []
    for band, unit, scale in (("r", "mJy", 1.0), ("gamma", "ph/(cm2 s)", 1e-6)):
        rows = "".join(f"{a},{scale * (1 + 0.2 * np.cos(a))},{scale * 0.05}\n" for a in t)
        uploads.append(
            upload_create(
                uploader=contributor,
                data=("time,value,error\n" + rows).encode(),
                file_name=f"{band}.csv",
                params=UploadParams(
                    source="tarn-7",
                    band=band,
                    instrument="hollow-hill-1m",
                    value_unit=unit,
                    **BARY,
                ),
            )
        )
    job = Job.objects.create(
        kind="correlation", owner=curator, source=catalogue["source"], parameters={}
    )
    return {
        "token": Token.objects.create(user=curator).key,
        "known": {
            "/api/v1/sources/{slug}": "tarn-7",
            "/api/v1/bands/{slug}": "r",
            "/api/v1/instruments/{slug}": "hollow-hill-1m",
            "/api/v1/uploads/{id}": uploads[0].pk,
            "/api/v1/jobs/{id}": str(job.pk),
        },
    }


def _known_path_parameters(path: str, known: dict[str, Any]) -> dict[str, Any] | None:
    """Path parameters naming an object that exists, so requests get past the 404."""
    for prefix, value in known.items():
        if path.startswith(prefix):
            return {prefix.rsplit("{", 1)[1].rstrip("}"): value}
    return None


def _fuzz(
    operation: Any,
    strategy: Any,
    base_url: str,
    headers: dict[str, str],
    statuses: Counter[tuple[str, int]],
    failures: list[str],
) -> None:
    """Send the generated requests of one operation; record statuses and failed checks."""

    @settings(
        max_examples=EXAMPLES_PER_OPERATION,
        derandomize=True,
        deadline=None,
        database=None,
        phases=[Phase.explicit, Phase.generate],
        suppress_health_check=list(HealthCheck),
    )
    @given(case=strategy)
    def run(case: Any) -> None:
        response = case.call(base_url=base_url, headers=headers, timeout=60)
        statuses[(operation.label, response.status_code)] += 1
        try:
            case.validate_response(
                response, checks=[not_a_server_error, response_schema_conformance]
            )
        except (Exception, BaseExceptionGroup) as exc:  # noqa: BLE001 - collect every failure
            lines = [x.strip() for x in str(exc).splitlines() if x.strip()]
            cause = " | ".join(lines[2:4] + [x for x in lines if x.startswith("Schema at")][:1])
            failure = f"{operation.label} -> {response.status_code}: {cause}"
            if failure not in failures:
                failures.append(failure)

    run()


@pytest.mark.django_db(transaction=True, serialized_rollback=True)
def test_every_operation_answers_within_its_schema(live_server, seeded):
    headers = {"Authorization": f"Token {seeded['token']}"}
    schema = schemathesis.openapi.from_url(
        f"{live_server.url}/api/v1/schema/?format=json", headers=headers
    )
    statuses: Counter[tuple[str, int]] = Counter()
    failures: list[str] = []
    # reads first, writes last: a PUT may rename or a DELETE remove the known objects
    order = {"GET": 0, "POST": 1, "PUT": 2, "PATCH": 2, "DELETE": 3}
    operations = sorted(
        (r.ok() for r in schema.get_all_operations()), key=lambda op: order[op.method.upper()]
    )
    n_operations = len(operations)
    for operation in operations:
        strategy = operation.as_strategy()
        fixed = _known_path_parameters(operation.path, seeded["known"])
        if fixed is not None:
            named = operation.as_strategy(path_parameters=fixed)
            free = strategy
            # three in four name a known object (one_of would weigh the two alike)
            strategy = st.integers(0, 3).flatmap(lambda i, k=named, f=free: f if i == 3 else k)

        _fuzz(operation, strategy, live_server.url, headers, statuses, failures)
    total = sum(statuses.values())
    by_status: Counter[int] = Counter()
    for (_, code), n in statuses.items():
        by_status[code] += n
    summary = (
        f"schemathesis {schemathesis.__version__}: {n_operations} operations, {total} requests, "
        f"statuses {dict(sorted(by_status.items()))}, {len(failures)} distinct failures"
    )
    print(summary)
    for (label, code), n in sorted(statuses.items()):
        print(f"    {label}: {code} x{n}")
    known = {
        key: [f for f in failures if f.startswith(f"{key[0]} -> {key[1]}:") and key[2] in f]
        for key in KNOWN_FAILURES
    }
    for key, found in known.items():
        print(
            f"  known ({'seen' if found else 'NOT SEEN'}): {key[0]} -> {key[1]}: "
            f"{KNOWN_FAILURES[key]}"
        )
    new = [f for f in failures if not any(f in found for found in known.values())]
    for f in new:
        print("  NEW " + f)
    assert n_operations >= 40 and total >= 200, summary
    assert not new, summary + "\n" + "\n".join(new)
    gone = [key for key, found in known.items() if not found]
    assert not gone, f"fixed? drop from KNOWN_FAILURES: {gone}"
