"""``benchlab fit`` end to end: CSV and session-record inputs, JSON Lines, --save, errors."""

from __future__ import annotations

import json
import re

import numpy as np
import pytest

from benchlab.cli import main
from benchlab.models import DeviceParams

PARTS = {"Q01": DeviceParams("ekv", vth=2.85, kp=2.4, theta=0.25, n=1.5),
         "Q02": DeviceParams("ekv", vth=3.05, kp=2.1, theta=0.3, n=1.6)}


def _rows(part, seed):
    rng = np.random.default_rng(seed)
    currents = np.geomspace(10e-6, 0.1, 24)
    vgs = part.vgs_at(currents)
    return vgs, currents * (1 + 5e-4 * rng.standard_normal(currents.size))


def _session(root):
    """A session folder as docs/session-format.md describes it (invented demo lot)."""
    folder = root / "20261202-101500-demo-bag"
    folder.mkdir()
    meta = {"format": "benchlab-session/1", "id": folder.name, "lot": "demo-bag", "parts": list(PARTS)}
    (folder / "session.json").write_text(json.dumps(meta))
    for seed, (label, part) in enumerate(PARTS.items()):
        vgs, ids = _rows(part, seed)
        lines = ["point,time_s,vgs,id,v_source,i_source,status,direction"]
        lines.append(f"0,0.0,0.8,-3e-10,0.8,0,ok,up")  # a search step before the part conducts
        for k, (v, i) in enumerate(zip(vgs, ids), start=1):
            lines.append(f"{k},{k * 0.1},{v:.6f},{i:.6e},{v + 470 * i:.5f},{i:.6e},ok,up")
        lines.append(f"{len(ids) + 1},9.9,inf,nan,12,0,over_range,up")
        (folder / f"{label}.csv").write_text("\n".join(lines) + "\n")
        sidecar = {"format": "benchlab-sweep/1", "label": label, "lot": "demo-bag", "complete": True,
                   "classification": "good", "plan": {"detect_current_a": 2e-6}, "fits": []}
        (folder / f"{label}.json").write_text(json.dumps(sidecar))
    return folder


def test_json_lines_for_a_session_folder(tmp_path, capsys):
    folder = _session(tmp_path)
    assert main(["fit", str(folder), "--json", "--at-current", "0.05"]) == 0
    lines = capsys.readouterr().out.strip().splitlines()
    assert len(lines) == 2
    for line, (label, part) in zip(lines, PARTS.items()):
        row = json.loads(line)
        for key in ("file", "model", "vth", "kp", "theta", "vth_cc", "gm", "rms_residual", "stderr", "flags"):
            assert key in row
        assert row["file"].endswith(f"{label}.csv")
        assert row["model"] == "ekv"
        assert row["vth"] == pytest.approx(part.vth, abs=0.005)
        assert row["gm"] == pytest.approx(float(part.gm_at(0.05)), rel=0.01)
        assert row["vth_cc"] == pytest.approx(float(part.vgs_at(250e-6)), abs=1e-3)
        assert set(row["stderr"]) >= {"vth", "kp", "theta", "gm", "vth_cc"}
        assert row["points_skipped"] == 2  # the search step and the over-range reading


def test_table_output_and_model_choice(tmp_path, capsys):
    folder = _session(tmp_path)
    assert main(["fit", str(folder / "Q01.json"), "--model", "theta"]) == 0
    out = capsys.readouterr().out
    assert "Q01" in out and "theta" in out and "Vth V" in out


def test_save_appends_to_sidecar_and_refit_matches(tmp_path, capsys):
    folder = _session(tmp_path)
    assert main(["fit", str(folder / "Q02.csv"), "--save", "--json"]) == 0
    printed = json.loads(capsys.readouterr().out)
    sidecar = json.loads((folder / "Q02.json").read_text())
    assert len(sidecar["fits"]) == 1
    stored = sidecar["fits"][0]
    assert stored["vth"] == printed["vth"] and stored["options"]["model"] == "auto"
    assert stored["fitter_version"]
    # re-run from the raw CSV: same numbers, a second entry
    assert main(["fit", str(folder / "Q02.csv"), "--save", "--json"]) == 0
    again = json.loads(capsys.readouterr().out)
    assert again["vth"] == printed["vth"]
    assert len(json.loads((folder / "Q02.json").read_text())["fits"]) == 2


def test_save_refused_for_plain_csv_and_nothing_written(tmp_path, capsys):
    folder = _session(tmp_path)
    plain = tmp_path / "plain.csv"
    vgs, ids = _rows(PARTS["Q01"], 9)
    plain.write_text("vgs,id\n" + "\n".join(f"{v},{i}" for v, i in zip(vgs, ids)) + "\n")
    before = (folder / "Q01.json").read_text()
    assert main(["fit", str(folder / "Q01.csv"), str(plain), "--save"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "plain.csv" in err and "Traceback" not in err
    assert (folder / "Q01.json").read_text() == before


def test_bad_file_is_one_line_error(tmp_path, capsys):
    bad = tmp_path / "bad.csv"
    bad.write_text("vgs,id\n3.0,1e-3\n3.1,-2e-3\n")
    assert main(["fit", str(bad)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("benchlab: error:") and "bad.csv, row 2" in err and err.count("\n") == 1


def test_bad_option_values_rejected(tmp_path, capsys):
    folder = _session(tmp_path)
    with pytest.raises(SystemExit):
        main(["fit", str(folder), "--at-current", "-1"])
    with pytest.raises(SystemExit):
        main(["fit", str(folder), "--bootstrap", "x"])
    capsys.readouterr()
    # the temperature is refused in the unit the user typed, before anything is read or written
    assert main(["fit", str(folder), "--ambient", "-500", "--save"]) == 2
    err = capsys.readouterr().err
    assert "--ambient -500 degC is not a bench temperature" in err and err.count("\n") == 1
    assert json.loads((folder / "Q01.json").read_text())["fits"] == []
    # a window that holds no points says where the data are
    assert main(["fit", str(folder / "Q01.csv"), "--window", "10", "20"]) == 2
    assert "only 0 of the 24 points (measured 1e-05 to 0.1 A)" in capsys.readouterr().err


def test_bootstrap_option(tmp_path, capsys):
    folder = _session(tmp_path)
    assert main(["fit", str(folder / "Q01.csv"), "--json", "--bootstrap", "40", "--at-current", "0.05"]) == 0
    row = json.loads(capsys.readouterr().out)
    assert row["stderr_method"] == "bootstrap/40"
    assert 0 < row["stderr"]["vth"] < 0.01


def test_folder_of_sessions(tmp_path, capsys):
    _session(tmp_path)
    empty = tmp_path / "20261202-120000-empty"
    empty.mkdir()
    (empty / "session.json").write_text(json.dumps({"format": "benchlab-session/1", "parts": []}))
    assert main(["fit", str(tmp_path), "--json"]) == 0
    assert len(capsys.readouterr().out.strip().splitlines()) == 2
    assert main(["fit", str(empty)]) == 2
    assert "no part sweeps" in capsys.readouterr().err


def test_dud_without_conducting_points_is_skipped_not_fatal(tmp_path, capsys):
    folder = _session(tmp_path)
    meta = json.loads((folder / "session.json").read_text())
    meta["parts"].append("Q03")
    (folder / "session.json").write_text(json.dumps(meta))
    lines = ["point,time_s,vgs,id,v_source,i_source,status,direction"]
    lines += [f"{k},{k * 0.1},{0.5 * k},{1e-10 * k},{0.5 * k},0,ok,up" for k in range(1, 20)]
    (folder / "Q03.csv").write_text("\n".join(lines) + "\n")
    (folder / "Q03.json").write_text(json.dumps({"format": "benchlab-sweep/1", "label": "Q03",
                                                 "classification": "open", "plan": {"detect_current_a": 2e-6}}))
    assert main(["fit", str(folder), "--json"]) == 0
    captured = capsys.readouterr()
    assert [json.loads(line)["label"] for line in captured.out.strip().splitlines()] == ["Q01", "Q02"]
    assert "skipped Q03 (classified open)" in captured.err
    # a good part with nothing to fit is still an error
    sidecar = json.loads((folder / "Q03.json").read_text())
    sidecar["classification"] = "good"
    (folder / "Q03.json").write_text(json.dumps(sidecar))
    assert main(["fit", str(folder)]) == 2
    assert "Q03.csv: no fittable points" in capsys.readouterr().err


def test_operating_curve_output(tmp_path, capsys):
    folder = _session(tmp_path)
    assert main(["fit", str(folder / "Q01.csv"), "--json", "--curve", "5"]) == 0
    row = json.loads(capsys.readouterr().out)
    part = PARTS["Q01"]
    curve = row["curve"]
    assert len(curve["id"]) == 5
    assert curve["id"][0] == pytest.approx(row["window"]["i_min"]) and curve["id"][-1] == pytest.approx(
        row["window"]["i_max"])
    for i, v, g, e in zip(curve["id"], curve["vgs"], curve["gm"], curve["gm_over_id"]):
        assert v == pytest.approx(float(part.vgs_at(i)), abs=2e-3)
        assert g == pytest.approx(float(part.gm_at(i)), rel=0.02)
        assert e == pytest.approx(g / i)
    assert main(["fit", str(folder / "Q01.csv"), "--curve", "4"]) == 0
    assert "gm/ID 1/V" in capsys.readouterr().out


def test_session_ambient_sets_the_fit_temperature(tmp_path, capsys):
    folder = _session(tmp_path)
    meta = json.loads((folder / "session.json").read_text())
    meta["ambient_c"] = 35.0
    (folder / "session.json").write_text(json.dumps(meta))
    assert main(["fit", str(folder / "Q01.json"), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["params"]["temperature_k"] == pytest.approx(308.15)
    assert main(["fit", str(folder), "--json", "--ambient", "20"]) == 0
    rows = [json.loads(line) for line in capsys.readouterr().out.strip().splitlines()]
    assert all(row["params"]["temperature_k"] == pytest.approx(293.15) for row in rows)


def test_table_names_every_threshold_and_the_flags(tmp_path, capsys):
    folder = _session(tmp_path)
    assert main(["fit", str(folder / "Q01.csv"), "--at-current", "0.05"]) == 0
    out = capsys.readouterr().out
    for label in ("fitted model", "constant current", "sqrt(ID) max-slope extrapolation",
                  "second derivative of sqrt(ID)"):
        assert label in out
    part = PARTS["Q01"]
    # the inverse a mirror design needs: VGS at the operating current, from the fitted curve
    shown = re.search(r"at 0.05 A: VGS ([0-9.]+) V, gm ([0-9.]+) A/V", out)
    assert shown, out
    assert float(shown.group(1)) == pytest.approx(float(part.vgs_at(0.05)), abs=2e-3)
    assert float(shown.group(2)) == pytest.approx(float(part.gm_at(0.05)), rel=0.01)
    # a third of a decade of current: the table shows the flag's code, not a count
    currents = np.geomspace(20e-3, 40e-3, 6)
    thin = tmp_path / "thin.csv"
    thin.write_text("vgs,id\n" + "".join(f"{v:.6f},{i:.6e}\n" for v, i in zip(part.vgs_at(currents), currents)))
    assert main(["fit", str(thin), "--model", "square"]) == 0
    out = capsys.readouterr().out
    assert "current_range_too_narrow" in out.splitlines()[1]
    # a threshold the data cannot give is shown missing with its reason (this sweep starts 0.1 V above VT)
    assert "second derivative of sqrt(ID) - (no kink above the noise" in out
