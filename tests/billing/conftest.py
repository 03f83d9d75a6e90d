"""Billing fixtures: the facility's zone (Vienna) and a clock after the end of March 2027."""

from __future__ import annotations

import pytest
import time_machine

from tests.billing.helpers import at


@pytest.fixture(autouse=True)
def _vienna(settings):
    settings.TIME_ZONE = "Europe/Vienna"


@pytest.fixture
def clock():
    """Friday 2 April 2027, 08:00 in Vienna: March is over and can be finalised."""
    with time_machine.travel(at(2, 8, month=4), tick=False) as traveller:
        yield traveller
