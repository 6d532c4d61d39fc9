"""``benchlab parts show --plot`` and ``benchlab fit --plot``: the report's figure of one part, from the CLI."""

from __future__ import annotations

import json

import numpy as np
import pytest
from matplotlib.image import imread

from benchlab.cli import main
from benchlab.models import DeviceParams
from session_builder import write_session
from test_report import _check_png

LOT = "demo-bag"  # invented test data


@pytest.fixture
def session(tmp_path):
    parts = [{"label": "Q01", "params": DeviceParams("square", vth=2.9, kp=1.1), "noise": 0.002},
             {"label": "Q02", "params": DeviceParams("square", vth=3.0, kp=1.0), "noise": 0.002}]
    return write_session(tmp_path, "20261202-101500-demo-bag", LOT, parts)


def test_fit_plot_draws_the_fitted_points_curve_and_residuals(session, tmp_path, capsys):
    out = tmp_path / "q01.png"
    assert main(["fit", str(session / "Q01.json"), "--model", "square", "--json", "--plot", str(out)]) == 0
    fitted = json.loads(capsys.readouterr().out)
    _check_png(out.read_bytes())
    # PNG specification (ISO/IEC 15948) IHDR: the figure is 7 x 5.2 in at 100 dpi, cropped tight: wider than tall
    height, width = imread(out).shape[:2]
    assert width > height > 300

    from benchlab.report.part_figures import part_fit_figure
    from benchlab.services.fitting import load_source, resolve_inputs

    (source,) = resolve_inputs([session / "Q01.json"])
    sweep = load_source(source)
    params = DeviceParams.from_dict(fitted["params"])
    fig = part_fit_figure("Q01", sweep.vgs, sweep.id, params, vgs_at_cc=fitted["vth_cc"],
                          window=(fitted["window"]["i_min"], fitted["window"]["i_max"]))
    curve_ax, residual_ax = fig.axes
    # the residuals' rms is the one the fitter minimised and reports (rms_relative)
    assert residual_ax.get_title(loc="right") == f"rms {fitted['rms_relative'] * 100:.3g} % in the window"
    # the drawn curve is the square law ID = KP/2 (VGS - Vth)^2 with the fitted numbers (Sedra & Smith)
    line = next(l for l in curve_ax.get_lines() if l.get_label() == "square fit")
    v, i = line.get_data()
    assert np.allclose(i, fitted["params"]["kp"] / 2 * (v - fitted["params"]["vth"]) ** 2, rtol=1e-9)


def test_fit_plot_of_several_sweeps_and_bad_names(session, tmp_path, capsys):
    assert main(["fit", str(session), "--plot", str(tmp_path / "lot.png")]) == 0
    assert sorted(p.name for p in tmp_path.glob("lot-*.png")) == ["lot-Q01.png", "lot-Q02.png"]
    capsys.readouterr()
    for bad in (tmp_path / "q.txt", tmp_path / "missing" / "q.png"):
        assert main(["fit", str(session), "--plot", str(bad)]) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and "Traceback" not in err and not bad.exists()


def test_parts_show_plot_of_a_stored_part_and_a_hand_entered_one(session, tmp_path, capsys):
    lib = str(tmp_path / "lib.db")
    assert main(["library", "import", str(session), "--library", lib]) == 0
    assert main(["parts", "add", "R1", "--lot", LOT, "--vth", "3.9", "--gm", "0.544", "--library", lib]) == 0
    for label in ("Q02", "R1"):
        out = tmp_path / f"{label}.png"
        assert main(["parts", "show", label, "--library", lib, "--plot", str(out)]) == 0
        _check_png(out.read_bytes())
    capsys.readouterr()
    assert main(["parts", "show", "Q99", "--library", lib, "--plot", str(tmp_path / "q99.png")]) == 2
    assert "Q99" in capsys.readouterr().err and not (tmp_path / "q99.png").exists()
