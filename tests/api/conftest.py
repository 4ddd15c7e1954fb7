"""API test settings: no test is throttled by accident.

The throttles (api/throttles.py) count requests in Django's cache, which is
local memory shared by the whole process (and by a live server thread);
tests/conftest.py empties it before each test, but one test may still send
more than a production budget (the property and schema tests send hundreds).
Each API test therefore runs with rates far above what any test sends; the
tests of the throttles themselves set low rates explicitly.
"""

from __future__ import annotations

from typing import Any

import pytest

UNTHROTTLED = {"read": "1000000/hour", "heavy": "1000000/hour", "uploads": "1000000/hour"}


@pytest.fixture(autouse=True)
def _unthrottled(settings: Any) -> None:
    settings.REST_FRAMEWORK = {
        **settings.REST_FRAMEWORK,
        "DEFAULT_THROTTLE_RATES": dict(UNTHROTTLED),
    }
