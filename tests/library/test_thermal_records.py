"""Measured thermal values in the library: stored by the thermal service, newest per quantity, exported, imported."""

from __future__ import annotations

import csv
import io

import pytest

from benchlab.library import Library, export_library, import_library
from benchlab.library.exchange import csv_rows
from benchlab.library.thermal import measured_thermal, record_thermal
from benchlab.models import DeviceParams
from benchlab.services import thermal as svc
from benchlab.services.characterize import SimOptions


def test_newest_value_of_each_quantity_and_exchange(lib, new_library_target):
    part = lib.add_part("Q01", lot="rack", params=DeviceParams(model="square", vth=2.9, kp=2.5))
    with lib.write():
        record_thermal(lib, part.id, "tempco", {"vth_tempco": -5.5e-3, "kp_exponent": 1.4, "ztc_vgs": 4.1,
                                                 "ztc_id": 2.0}, {"vth_tempco": 1e-5}, measured_at="2026-01-01T00:00:00")
        record_thermal(lib, part.id, "rth", {"rth": 61.0}, {"rth": 0.4}, measured_at="2026-01-02T00:00:00")
        record_thermal(lib, part.id, "tempco", {"vth_tempco": -5.7e-3, "kp_exponent": 1.5, "ztc_vgs": 4.2,
                                                 "ztc_id": 2.1}, {}, measured_at="2026-01-03T00:00:00")
    found = measured_thermal(lib, part.id)
    assert found["vth_tempco"]["value"] == pytest.approx(-5.7e-3)  # the newer tempco run wins
    assert found["rth"]["value"] == pytest.approx(61.0)  # a tempco run does not blank the Rth
    rows = list(csv.DictReader(io.StringIO(_csv_text(csv_rows(lib)))))
    assert float(rows[0]["rth"]) == pytest.approx(61.0) and float(rows[0]["stderr_rth"]) == pytest.approx(0.4)
    data = export_library(lib)
    with Library.open(new_library_target()) as other:
        counts = import_library(other, data)
        assert counts["thermal"] == 3
        assert measured_thermal(other, other.get_part("rack/Q01").id) == found


def _csv_text(rows):
    out = io.StringIO()
    writer = csv.DictWriter(out, fieldnames=list(rows[0]))
    writer.writeheader()
    writer.writerows(rows)
    return out.getvalue()


def test_thermal_run_stores_its_result_on_the_library_part(tmp_path):
    path = tmp_path / "lab.db"
    with Library.open(path, create=True) as lib:
        lib.add_part("Q01", lot="rack")
    outcome = svc.measure_rth("Q01", sim=SimOptions(), sessions_root=tmp_path / "s", library=str(path))
    assert "rack/Q01" in outcome.stored
    with Library.open(path) as lib:
        stored = measured_thermal(lib, lib.get_part("Q01").id)
    assert stored["rth"]["value"] == pytest.approx(outcome.rth.rth)
    assert stored["rth"]["session_path"] == outcome.session_path
    # a part that is not in the library: nothing stored, said so, nothing created
    other = svc.measure_rth("Q02", sim=SimOptions(), sessions_root=tmp_path / "s", library=str(path))
    assert other.stored == ""
    assert not (tmp_path / "missing.db").exists()


def test_api_thermal_frame_matches_the_cli_json(tmp_path, capsys, monkeypatch):
    import json

    from benchlab import api
    from benchlab.cli import main

    path = tmp_path / "lab.db"
    with Library.open(path, create=True) as lib:
        lib.add_part("Q01", lot="rack")
        lib.add_part("Q02", lot="rack")
    monkeypatch.chdir(tmp_path)
    assert main(["thermal", "rth", "--part", "Q01", "--sim", "--json", "--library", str(path)]) == 0
    printed = json.loads(capsys.readouterr().out)
    frame = api.thermal(str(path)).set_index("label")
    assert frame.loc["Q01", "rth"] == pytest.approx(printed["rth"])
    assert frame.loc["Q01", "rth_stderr"] == pytest.approx(printed["stderr"]["rth"])
    assert frame.loc["Q02"].isna()["rth"]  # never measured: empty, not a made-up number


def test_a_label_in_two_lots_is_stored_on_the_lot_given(tmp_path, capsys):
    # the same label in two lots (a bag swept twice under two lot names): the run said 'ambiguous ... name it as
    # LOT/LABEL', but --part refuses a '/' and thermal had no way to name the lot, so the values could not be stored
    from benchlab.cli import main

    path = tmp_path / "lab.db"
    with Library.open(path, create=True) as lib:
        lib.add_part("Q01", lot="rack")
        lib.add_part("Q01", lot="spares")
    outcome = svc.measure_rth("Q01", sim=SimOptions(), sessions_root=tmp_path / "s", library=str(path))
    assert outcome.stored.startswith("not stored") and "--lot" in outcome.stored
    assert main(["thermal", "rth", "--part", "Q01", "--lot", "spares", "--sim", "--sessions", str(tmp_path / "s"),
                 "--library", str(path)]) == 0
    assert "spares/Q01" in capsys.readouterr().out
    with Library.open(path) as lib:
        assert "rth" in measured_thermal(lib, lib.get_part("spares/Q01").id)
        assert measured_thermal(lib, lib.get_part("rack/Q01").id) == {}
    # a bad lot name is refused before anything is powered or written
    assert main(["thermal", "rth", "--part", "Q01", "--lot", "../x", "--sim", "--sessions", str(tmp_path / "t"),
                 "--library", str(path)]) != 0
    assert not (tmp_path / "t").exists()
