"""The Characterize view's temperature rise: P x Rth with the part's measured Rth from the library, else the
designer's default assumption, shown as assumed."""

from __future__ import annotations

import pytest

from benchlab.library import Library
from benchlab.library.thermal import record_thermal
from benchlab.models import DeviceParams
from benchlab.services import station

from .conftest import SIZE, connected, make_app, press_outside_fields, until


def _library_with_measured_rth(path, rth: float) -> str:
    with Library.open(str(path)) as lib:
        part = lib.add_part("Q01", lot="led-rack", params=DeviceParams(model="square", vth=2.5, kp=2.0))
        with lib.write():
            record_thermal(lib, part.id, "rth", {"rth": rth}, {"rth": 0.5}, measured_at="2026-11-30T10:00:00")
    return str(path)


def test_rise_uses_the_measured_rth_else_the_assumption(tmp_path):
    library = _library_with_measured_rth(tmp_path / "lib.db", 48.0)
    heating = station.part_heating(library, "led-rack", "Q01")
    # junction rise = P x Rth, the definition of thermal resistance (JEDEC JESD51-1, from memory)
    assert heating.measured and heating.rth_k_per_w == 48.0 and heating.rise_k(0.5) == pytest.approx(24.0)
    assert "measured 2026-11-30" in heating.describe() and not heating.hot(0.5) and heating.hot(0.7)
    for lot, label, where in (("led-rack", "Q02", library), ("led-rack", "Q01", str(tmp_path / "none.db"))):
        assumed = station.part_heating(where, lot, label)  # no such part / no library: the designer's default
        assert not assumed.measured and assumed.rth_k_per_w == 62.0 and "assumed, not measured" in assumed.describe()


async def test_characterize_shows_power_and_rise_of_a_part_measured_before(tmp_path):
    app = make_app(tmp_path, library=_library_with_measured_rth(tmp_path / "lib.db", 48.0))
    async with app.run_test(size=SIZE) as pilot:
        await connected(pilot)
        await pilot.press("f2")
        await press_outside_fields(pilot, "r")  # Q01 again: a retest of the stored part
        await until(pilot, lambda: app.running_tag is None and app.verdict is not None, 30)
        live = str(app.query_one("#char-live").render())
    assert "part power" in live and "temperature rise (P x Rth)" in live and "Rth 48 K/W measured" in live
    assert "assumed" not in live
