"""``benchlab design`` end to end: inline parts, a real device library, saving, bad input."""

import json
import math

import numpy as np
import pytest

from benchlab.cli import main
from benchlab.design.matching import brute_force_pairs, current_grid
from benchlab.design.parts import Part
from benchlab.library import Library
from benchlab.models import DeviceParams


@pytest.fixture
def bag_library(tmp_path):
    """An invented demo bag: 16 N-channel power MOSFETs measured for a plant-rack LED driver (invented data)."""
    path = tmp_path / "lib.db"
    rng = np.random.default_rng(2026)
    with Library.open(path) as lib:
        for i in range(16):
            params = DeviceParams("theta", float(rng.normal(3.0, 0.08)), kp=float(rng.uniform(0.8, 1.1)),
                                  theta=float(rng.uniform(0.05, 0.2)))
            lib.add_part(f"Q{i + 1:02d}", lot="grow-rack", params=params, stderr={"vth": 0.002, "kp": 0.01})
    return path


def run(capsys, *argv):
    code = main(list(argv))
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_inline_sink_json_has_the_documented_shape(capsys):
    code, out, _ = run(capsys, "design", "sink", "--supply", "12", "--resistor", "1k",
                       "--ref-model", "vth=3.9,gm=0.544", "--output-model", "vth=3.9,gm=0.544,label=TWIN",
                       "--load-voltage", "5", "--json")
    assert code == 0
    data = json.loads(out)
    # common practice hand example: 12 V through 1 kOhm into Vth 3.9 V, gm 0.544 A/V -> 8.085 mA
    assert data["i_ref"] == pytest.approx(8.085e-3, abs=5e-7)
    assert data["vgs"] == pytest.approx(3.91486, abs=5e-6)
    assert data["r_chosen"] == 1000.0 and data["r_exact"] is None and data["series"] == "E24"
    assert data["outputs"][0]["part"] == "TWIN"
    assert data["outputs"][0]["error"] == pytest.approx(0.0, abs=1e-12)
    assert {"part", "i_out", "error", "v_compliance", "p_part"} <= set(data["outputs"][0])
    assert len(data["cautions"]) >= 5


def test_text_report_ends_with_the_cautions(capsys):
    code, out, _ = run(capsys, "design", "sink", "--supply", "12", "--at-current", "20m", "--ref-model", "vth=2.5,kp=0.8",
                       "--output-model", "vth=2.52,kp=0.8", "--series", "E96")
    assert code == 0
    tail = out.strip().split("CAUTIONS", 1)
    assert len(tail) == 2 and "licensed practice" in tail[1] and "Spirito" in tail[1]
    assert "E96" in tail[0]


def test_match_from_the_library_equals_brute_force(capsys, bag_library):
    code, out, _ = run(capsys, "design", "match", "--library", str(bag_library), "--at-current", "50m",
                       "--at-current-max", "0.2", "--outputs", "1", "--json")
    assert code == 0
    data = json.loads(out)
    with Library.open(bag_library) as lib:
        parts = [Part(r.label, r.params, lot=r.lot) for r in lib.parts()]
    # outside check: exhaustive search over every pair
    expected = brute_force_pairs(parts, current_grid(0.05, 0.2))
    assert [s["worst_error"] for s in data["sets"]] == pytest.approx(expected, rel=1e-12)
    code, out, _ = run(capsys, "design", "match", "--library", str(bag_library), "--at-current", "50m", "--outputs", "3",
                       "--sets", "2")
    assert code == 0 and out.count("ref grow-rack/") == 2


def test_sink_picks_a_set_saves_it_and_reserves_the_parts(capsys, bag_library, tmp_path):
    netlist = tmp_path / "sink.cir"
    code, out, _ = run(capsys, "design", "sink", "--library", str(bag_library), "--supply", "24", "--at-current", "0.3",
                       "--outputs", "3", "--load-voltage", "6", "--save", "--json", "--spice", str(netlist))
    assert code == 0
    data = json.loads(out)
    assert isinstance(data["design_id"], int) and len(data["outputs"]) == 3
    assert ".op" in netlist.read_text() and "VLOAD3" in netlist.read_text()
    with Library.open(bag_library) as lib:
        reserved = lib.parts(state="reserved")
        assert len(reserved) == 4
        stored = lib.design(data["design_id"])
        assert stored["cautions"] == data["cautions"]
        assert [f"{p['lot']}/{p['label']}" for p in stored["recorded_parts"]][0] == data["ref"]
    # the same parts again: not in stock any more, one clear error, nothing saved
    ref = data["ref"]
    outs = ",".join(o["part"] for o in data["outputs"])
    code, out, err = run(capsys, "design", "sink", "--library", str(bag_library), "--supply", "24", "--at-current", "0.3",
                         "--ref", ref, "--outputs-from", outs, "--save")
    # who took it, in the words an engineer at another bench needs
    assert code != 0 and f"was reserved by design {data['design_id']} at " in err and "Traceback" not in err and len(err.strip().splitlines()) == 1
    with Library.open(bag_library) as lib:
        assert len(lib.designs()) == 1


def test_sink_with_a_named_reference_picks_its_closest_outputs(capsys, bag_library):
    code, out, _ = run(capsys, "design", "sink", "--library", str(bag_library), "--supply", "24", "--at-current", "0.3",
                       "--ref", "Q05", "--outputs", "2", "--json")
    assert code == 0
    data = json.loads(out)
    with Library.open(bag_library) as lib:
        ref = lib.get_part("Q05").params
        others = [r for r in lib.parts() if r.label != "Q05"]
    vgs = float(ref.vgs_at(0.3))
    errors = sorted(abs(float(r.params.current(vgs)) / 0.3 - 1) for r in others)
    # the chosen outputs are the two with the smallest error at the target current (checked by hand here)
    chosen = sorted(abs(float(next(r for r in others if f"{r.lot}/{r.label}" == o["part"]).params.current(vgs)) / 0.3 - 1)
                    for o in data["outputs"])
    assert chosen == pytest.approx(errors[:2])


def test_bin_counts_and_save(capsys, bag_library):
    code, out, _ = run(capsys, "design", "bin", "--library", str(bag_library), "--at-current", "0.1", "--width", "0.05",
                       "--save", "--json")
    assert code == 0
    data = json.loads(out)
    assert sum(b["count"] for b in data["bins"]) == 16
    with Library.open(bag_library) as lib:
        stored = lib.binning(data["binning_id"])
    assert sum(len(v) for v in stored["bins"].values()) == 16


@pytest.mark.parametrize("argv,needle", [
    (["--supply", "12", "--ref-model", "vth=2.5,kp=0.8"], "required"),
    (["--supply", "12", "--at-current", "0.02", "--resistor", "100", "--ref-model", "vth=2.5,kp=0.8"], "not allowed"),
    (["--supply", "12", "--at-current", "abc", "--ref-model", "vth=2.5,kp=0.8"], "argument --at-current: 'abc' is not a quantity"),
])
def test_usage_errors_exit_before_doing_anything(capsys, argv, needle):
    with pytest.raises(SystemExit) as info:
        main(["design", "sink", *argv])
    assert info.value.code == 2
    assert needle in capsys.readouterr().err


@pytest.mark.parametrize("argv,needle", [
    (["--supply", "12", "--at-current", "0.02"], "name a reference"),
    (["--supply", "12", "--at-current", "0.02", "--ref-model", "vth=2.5"], "KP"),
    (["--supply", "12", "--at-current", "0.02", "--ref-model", "vth=2.5,kp=0.8,bogus=1"], "expected key=value"),
    (["--supply", "1", "--at-current", "0.02", "--ref-model", "vth=2.5,kp=0.8"], "cannot drive"),
    (["--supply", "12", "--at-current", "0.02", "--ref-model", "vth=2.5,kp=0.8", "--save"], "library"),
    # a NaN reached the root solver as a traceback
    (["--supply", "12", "--resistor", "1k", "--ref-model", "vth=nan,gm=0.5"], "finite"),
    (["--supply", "12", "--at-current", "0.02", "--ref-model", "vth=2.5,kp=0.8", "--output-model", "vth=2.5,kp=inf"],
     "finite"),
])
def test_bad_requests_give_one_line_and_write_nothing(capsys, tmp_path, monkeypatch, argv, needle):
    monkeypatch.setenv("BENCHLAB_LIBRARY", str(tmp_path / "nothing.db"))
    spice = tmp_path / "x.cir"
    code, out, err = run(capsys, "design", "sink", *argv, "--spice", str(spice))
    assert code == 2 and needle in err
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert not spice.exists()


def test_a_p_channel_part_is_refused_for_the_sink(capsys, bag_library):
    with Library.open(bag_library) as lib:
        lib.add_part("P1", lot="grow-rack", polarity="P", params=DeviceParams("square", 2.0, kp=0.5))
    code, _, err = run(capsys, "design", "sink", "--library", str(bag_library), "--supply", "12", "--at-current", "0.1",
                       "--ref", "P1")
    assert code == 2 and "N-channel" in err


@pytest.mark.ngspice
def test_the_cli_netlist_of_a_library_design_agrees_with_ngspice(capsys, bag_library, tmp_path, ngspice_path):
    # Outside reference: ngspice (level-3 MOSFETs with THETA, the cards benchlab writes) simulating the very
    # file `benchlab design sink --spice` wrote, against the currents the same command printed as JSON.
    import subprocess

    from benchlab.design.spice import parse_ngspice_print

    netlist = tmp_path / "sink.cir"
    code, out, _ = run(capsys, "design", "sink", "--library", str(bag_library), "--supply", "24", "--at-current",
                       "0.3", "--outputs", "3", "--load-voltage", "6", "--mismatch-target", "0.02", "--json",
                       "--spice", str(netlist))
    assert code == 0
    data = json.loads(out)
    assert data["source_resistor"] > 0  # the degenerated case, so the source resistors are in the netlist too
    sim = subprocess.run([ngspice_path, "-b", str(netlist)], capture_output=True, text=True, timeout=60)
    values = parse_ngspice_print(sim.stdout)
    assert values["i_ref"] == pytest.approx(data["i_ref"], rel=5e-3)
    for k, output in enumerate(data["outputs"], start=1):
        assert values[f"i_out_{k}"] == pytest.approx(output["i_out"], rel=5e-3)


@pytest.mark.ngspice
def test_export_spice_writes_the_netlist_of_a_recorded_design(capsys, bag_library, tmp_path, ngspice_path):
    # Outside reference: ngspice simulating the netlist `benchlab export spice --design ID` rebuilt from the
    # library weeks later, against the currents the design printed when it was saved.
    import subprocess

    from benchlab.design.spice import parse_ngspice_print

    code, out, _ = run(capsys, "design", "sink", "--library", str(bag_library), "--supply", "24", "--at-current",
                       "0.3", "--outputs", "2", "--load-voltage", "6", "--degeneration", "1", "--save", "--json")
    data = json.loads(out)
    netlist = tmp_path / "again.cir"
    code, out, err = run(capsys, "export", "spice", "--library", str(bag_library), "--design",
                         str(data["design_id"]), "--out", str(netlist))
    assert code == 0, err
    text = netlist.read_text()
    assert ".op" in text and "RS2" in text and f"DC {data['supply']:g}" in text
    values = parse_ngspice_print(subprocess.run([ngspice_path, "-b", str(netlist)], capture_output=True,
                                                text=True, timeout=60).stdout)
    assert values["i_ref"] == pytest.approx(data["i_ref"], rel=5e-3)
    for k, output in enumerate(data["outputs"], start=1):
        assert values[f"i_out_{k}"] == pytest.approx(output["i_out"], rel=5e-3)
    # no such design, or nothing named at all: one line, no traceback
    for argv, needle in ((["--design", "99"], "no design 99"), ([], "name at least one part")):
        code, _, err = run(capsys, "export", "spice", "--library", str(bag_library), *argv)
        assert code == 2 and needle in err and len(err.strip().splitlines()) == 1


def test_a_design_beyond_the_fitted_current_range_says_so(capsys, tmp_path):
    # common practice: a fitted curve is only known where it was measured; 300 mA on parts swept to 100 mA is
    # an extrapolation and the cautions must say so (at 20 mA they must not)
    path = tmp_path / "lib.db"
    with Library.open(path) as lib:
        for label, vth in (("Q01", 3.0), ("Q02", 3.01)):
            part = lib.add_part(label, lot="grow-rack")
            with lib.write():
                lib.insert_fit(part.id, source="fit", params=DeviceParams("theta", vth, kp=1.0, theta=0.1),
                               result={"window": {"i_min": 1e-5, "i_max": 0.1}})
    argv = ["design", "sink", "--library", str(path), "--supply", "24", "--ref", "Q01", "--outputs-from", "Q02",
            "--load-voltage", "6", "--json"]
    code, out, _ = run(capsys, *argv, "--at-current", "0.3")
    cautions = json.loads(out)["cautions"]
    assert code == 0
    outside = [c for c in cautions if c.startswith("Outside the measured range")]
    assert len(outside) == 1 and "grow-rack/Q01" in outside[0] and "grow-rack/Q02" in outside[0]
    assert "100 mA" in outside[0] and "licensed practice" in cautions[-1]
    code, out, _ = run(capsys, *argv, "--at-current", "0.02")
    assert code == 0 and not any("measured range" in c for c in json.loads(out)["cautions"])
