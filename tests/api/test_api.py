"""benchlab.api: each DataFrame against the CLI's JSON for the same data (and handbook facts where they apply)."""

from __future__ import annotations

import csv
import json
import math

import numpy as np
import pandas as pd
import pytest

from benchlab import api
from benchlab.cli import main
from benchlab.errors import LibraryError
from session_builder import square_bag_with_dud, write_session

LOT = "demo-bag"  # invented test data in the demo scenario's style


@pytest.fixture
def bench_data(tmp_path):
    """A session of square-law parts (one open dud) imported into a library with the square-law fitter."""
    parts = square_bag_with_dud(5, vth0=2.8, vth_step=0.02, kp0=1.1, kp_sigma=0.05, seed=11)
    session = write_session(tmp_path, "20261202-101500-demo-bag", LOT, parts)
    lib = str(tmp_path / "lib.db")
    assert main(["library", "import", str(session), "--library", lib, "--model", "square"]) == 0
    return session, lib, parts


def _cli_json(capsys, args, lines=False):
    capsys.readouterr()
    assert main(args) == 0
    out = capsys.readouterr().out
    return [json.loads(line) for line in out.splitlines() if line.strip()] if lines else json.loads(out)


def test_parts_frame_matches_parts_list_json(bench_data, capsys):
    session, lib, truth = bench_data
    frame = api.parts(lib)
    listed = _cli_json(capsys, ["parts", "list", "--library", lib, "--state", "all", "--json"], lines=True)
    assert list(frame.label) == [p["label"] for p in listed]
    for (_, row), part in zip(frame.iterrows(), listed):
        assert row.lot == part["lot"] and row.state == part["state"] and row.classification == part["classification"]
        assert row["flags"] == ",".join(part["flags"])
        if part["params"] is None:
            assert math.isnan(row.vth) and math.isnan(row.kp) and pd.isna(row.model)
            continue
        assert row.model == part["params"]["model"] == "square"
        assert row.vth == part["params"]["vth"] and row.kp == part["params"]["kp"]
        assert row.vth_stderr == part["stderr"]["vth"] and row.kp_stderr == part["stderr"]["kp"]
        assert math.isnan(row.theta) and math.isnan(row.n)  # the square law has neither: empty, not 0
        # square law ID = KP/2 (VGS - Vth)^2, so gm = sqrt(2 KP ID) (Sedra & Smith, Microelectronic Circuits)
        assert row.gm_current == 250e-6 and row.gm == pytest.approx(math.sqrt(2 * row.kp * 250e-6), rel=1e-6)
    assert list(frame.state).count("rejected") == 1


def test_vgs_at_250ua_matches_the_fit_command(bench_data, capsys):
    session, lib, truth = bench_data
    frame = api.parts(lib, state="in_stock").set_index("label")
    fitted = _cli_json(capsys, ["fit", str(session), "--json"], lines=True)
    for line in (f for f in fitted if f["classification"] == "good"):
        # the library stored the curve's VGS at 250 uA of the same fit of the same points (vgs_at_cc), and it lies
        # within the measured, interpolated one's error (vth_cc)
        assert frame.loc[line["label"], "vth_cc"] == pytest.approx(line["vgs_at_cc"], abs=1e-9)
        assert abs(line["vgs_at_cc"] - line["vth_cc"]) <= 4 * line["stderr"]["vth_cc"]
    for part in truth[:5]:
        # square law: VGS = Vth + sqrt(2 I / KP) at I = 250 uA (Sedra & Smith), from the invented true curve
        expected = part["params"].vth + math.sqrt(2 * 250e-6 / part["params"].kp)
        assert frame.loc[part["label"], "vth_cc"] == pytest.approx(expected, abs=2e-4)


def test_sweeps_frame_holds_every_recorded_point(bench_data):
    session, lib, truth = bench_data
    frame = api.sweeps(session)
    assert sorted(frame.part.unique()) == [p["label"] for p in truth]
    with (session / "Q03.csv").open(newline="") as handle:  # read with the csv module, not benchlab
        rows = list(csv.DictReader(handle))
    q03 = frame[frame.part == "Q03"]
    assert len(q03) == len(rows)
    assert np.allclose(q03.vgs, [float(r["vgs"]) for r in rows], rtol=0, atol=0)
    assert np.allclose(q03.id, [float(r["id"]) for r in rows], rtol=0, atol=0)
    assert list(q03.status) == [r["status"] for r in rows]
    one = api.sweeps(session / "Q02.json")
    assert set(one.part) == {"Q02"} and len(one) == len(frame[frame.part == "Q02"])


def test_fits_frame_is_the_fit_commands_json(bench_data, capsys):
    session, lib, truth = bench_data
    frame = api.fits(session, model="theta")
    fitted = _cli_json(capsys, ["fit", str(session), "--model", "theta", "--json"], lines=True)
    assert len(frame) == len(fitted) >= 5
    for (_, row), line in zip(frame.iterrows(), fitted):
        for key in ("file", "label", "model", "vth", "kp", "theta", "vth_cc", "rms_residual", "flags", "params"):
            assert row[key] == line[key], key
        assert row.vth_stderr == line["stderr"]["vth"]


def test_designs_and_design_frames_match_the_cli(bench_data, capsys):
    session, lib, truth = bench_data
    made = _cli_json(capsys, ["design", "sink", "--library", lib, "--supply", "12", "--at-current", "20m",
                              "--outputs", "2", "--lot", LOT, "--save", "--json"])
    listing = api.designs(lib)
    exported = _cli_json(capsys, ["export", "json", "--library", lib])["designs"]
    assert len(listing) == len(exported) == 1
    row, stored = listing.iloc[0], exported[0]
    assert row.id == made["design_id"] and row.kind == stored["kind"] == "sink" and row.parts == 3
    for key in ("supply", "i_target", "r_chosen", "ref", "i_ref", "worst_error", "source_resistor"):
        assert row[key] == stored["design"][key] == made[key], key
    outputs = api.design(made["design_id"], lib)
    assert list(outputs.part) == [o["part"] for o in made["outputs"]]
    for (_, out), expected in zip(outputs.iterrows(), made["outputs"]):
        for key in ("i_out", "error", "v_compliance", "p_part", "drift_per_k", "region"):
            assert out[key] == expected[key], key
    assert outputs.attrs["design"]["cautions"] == made["cautions"]


def test_library_handle_is_read_only_by_default(bench_data, tmp_path):
    session, lib, truth = bench_data
    with api.library(lib) as handle:
        assert len(handle.parts(state=None)) == 6
        with pytest.raises(LibraryError, match="read-only"):
            handle.set_state("Q01", "used")
        with pytest.raises(LibraryError, match="read-only"):
            handle.add_part("Q99", lot=LOT)
    assert api.parts(lib, state="used").empty
    with api.library(lib, writable=True) as handle:
        handle.set_state("Q01", "used")
    assert list(api.parts(lib, state="used").label) == ["Q01"]
    with pytest.raises(LibraryError):
        api.parts(tmp_path / "nowhere.db")
    assert not (tmp_path / "nowhere.db").exists()  # reading never creates a library


def test_sweeps_of_a_plain_csv_are_the_points_the_fitter_reads(tmp_path):
    path = tmp_path / "bench-notes.csv"  # somebody else's CSV: just vgs and id
    path.write_text("vgs,id\n2.5,1e-5\n2.7,1e-4\n2.9,1e-3\n3.1,5e-3\n3.3,1.2e-2\n", encoding="utf-8")
    frame = api.sweeps(path)
    assert list(frame.part.unique()) == ["bench-notes"] and list(frame.point) == [0, 1, 2, 3, 4]
    assert list(frame.vgs) == [2.5, 2.7, 2.9, 3.1, 3.3] and list(frame.id) == [1e-5, 1e-4, 1e-3, 5e-3, 1.2e-2]
