"""Sweep options are checked against the bench's instrument profiles before anything is connected."""

from __future__ import annotations

import pytest

from benchlab.errors import InputError
from benchlab.instruments.config import simulator_bench_config
from benchlab.services.characterize import build_plan

# No instrument listens on these: a check that connected would fail with a connection error, not the range.
RESOURCES = {role: "TCPIP0::127.0.0.1::9::SOCKET" for role in ("supply", "meter", "smu")}


@pytest.mark.parametrize("fixture", ["resistor", "smu"])
def test_an_nplc_beyond_the_measuring_profile_is_refused_before_connecting(fixture):
    config = simulator_bench_config(RESOURCES, fixture=fixture)
    with pytest.raises(InputError, match=r"outside the instrument's .* \(profile '"):
        build_plan(config, nplc=1e6)
    with pytest.raises(InputError, match="outside the instrument's"):
        build_plan(config, nplc=1e-6)


def test_an_nplc_inside_the_profile_is_kept():
    assert build_plan(simulator_bench_config(RESOURCES), nplc=10.0).nplc == 10.0
