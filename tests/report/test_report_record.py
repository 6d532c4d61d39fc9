"""The report as a design record, rendered headless end to end through the CLI and checked for its content."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from benchlab.cli import main
from benchlab.models import DeviceParams
from benchlab.report.builder import monte_carlo_errors
from benchlab.report.figures import sweeps_figure
from benchlab.report.data import SweepTrace
from benchlab.report.html_page import POWER_RATINGS_W
from benchlab.report.schematic import sink_schematic
from session_builder import square_bag_with_dud, write_session
from test_report import _Collector, _check_png, embedded_pngs

LOT = "demo-bag"  # invented test data in the demo scenario's style


@pytest.fixture
def recorded(tmp_path_factory):
    """A bag of square-law parts (one open dud), imported with the real fitter, a sink designed and saved."""
    root = tmp_path_factory.mktemp("record")
    parts = square_bag_with_dud(6, vth0=2.9, vth_step=0.004, kp0=1.0, kp_sigma=0.01, seed=3)
    session = write_session(root, "20261202-101500-demo-bag", LOT, parts)
    lib = str(root / "lib.db")
    assert main(["library", "import", str(session), "--library", lib]) == 0
    return root, lib, parts


def _run(capsys, args):
    capsys.readouterr()
    code = main(args)
    return code, capsys.readouterr()


def test_report_is_a_design_record(recorded, capsys, tmp_path):
    root, lib, truth = recorded
    code, out = _run(capsys, ["design", "sink", "--library", lib, "--supply", "12", "--at-current", "20m",
                              "--outputs", "3", "--lot", LOT, "--mismatch-target", "0.05", "--monte-carlo", "200",
                              "--save", "--json"])
    assert code == 0, out.err
    design = json.loads(out.out)
    assert main(["parts", "add", "S1", "--lot", "spare-bag", "--vth", "3.3", "--kp", "0.9", "--library", lib]) == 0
    pdf = tmp_path / "record.pdf"
    code, out = _run(capsys, ["report", "--library", lib, "--lot", LOT, "--design", str(design["design_id"]),
                              "--out", str(tmp_path / "report"), "--pdf", str(pdf)])
    assert code == 0, out.err
    page = (tmp_path / "report" / "index.html").read_text(encoding="utf-8")
    parser = _Collector()
    parser.feed(page)
    text = "".join(parser.text)

    # self-contained: every image is embedded, each one a real PNG, each one captioned
    pngs = embedded_pngs(parser.images)
    for raw in pngs:
        _check_png(raw)
    captions = [c for c in parser.captions if c.startswith("Figure ")]
    assert len(captions) == len(pngs) == page.count("<figcaption>")
    # schematic, outputs chart, Monte Carlo, operating point, 4 parts' curves, lot curves, histograms, scatter
    assert len(pngs) == 4 + 4 + 3

    # the summary: verdict against the target, from the design's own numbers
    worst = max(abs(o["error"]) for o in design["outputs"])
    verdict = "MEETS the target" if worst <= 0.05 else "MISSES the target"
    assert text.index("Summary") < text.index(verdict) < text.index("The design")
    assert f"worst output error {worst * 100:.3f} %" in text and verdict in out.out
    # the resistor to buy: Joule's law P = I^2 R through the reference resistor (handbook), bought at twice that
    # or more (common practice); the rating is the smallest common one that covers it
    power = design["i_ref"] ** 2 * design["r_chosen"]
    assert design["p_resistor"] == pytest.approx(power, rel=1e-9)
    rating = min(r for r in POWER_RATINGS_W if r >= 2 * power)
    row = text[text.index("reference resistor R"):]
    assert row.split("E24 +/-5 %")[1].strip().startswith(f"{power * 1e3:.4g} mW")
    assert f"{rating * 1e3:g} mW" in row[:200] or f"{rating:g} W" in row[:200]
    for caution in design["cautions"]:
        assert caution in text[:text.index("The design")]  # the cautions are in the summary

    # bench and session details as the session recorded them
    for expected in ("BENCHLAB-SIM,SUPPLY,0,1", "22.5", "2026-12-02T10:15:00+00:00", "benchlab 0.1.0"):
        assert expected in text
    assert "operator" in text and "test" in text

    # parts table: VGS at 250 uA interpolated in the data; square law ID = KP/2 (VGS - Vth)^2 (Sedra & Smith,
    # Microelectronic Circuits) puts it at Vth + sqrt(2 I / KP) for the invented true curve
    q01 = truth[0]["params"]
    expected_cc = q01.vth + math.sqrt(2 * 250e-6 / q01.kp)
    row = text[text.index("Parts of the lot"):]
    row = row[row.index("Q01"):]
    assert f"{expected_cc:.4f}" in row[:250] or f"{expected_cc - 1e-4:.4f}" in row[:250] \
        or f"{expected_cc + 1e-4:.4f}" in row[:250]

    # statistics of the lot: 6 good of 7 parts; mean Vth of the fitted curves
    code, out = _run(capsys, ["parts", "list", "--library", lib, "--lot", LOT, "--state", "all", "--json"])
    fitted = [p["params"]["vth"] for p in map(json.loads, out.out.splitlines()) if p["state"] != "rejected"]
    stats = text[text.index("Statistics by lot"):]
    assert f"{np.mean(fitted):.4f}" in stats[:400] and "85.7" in stats[:400]  # 6 / 7
    # the library's other lot, after the report's own
    assert stats.index(LOT) < stats.index("spare-bag")
    assert '<td class="t">spare-bag</td><td>1</td><td>1</td><td>100.0</td><td>3.3000</td>' in page

    # the PDF: ISO 32000 files start with %PDF-; one page for the summary and one per figure
    raw = pdf.read_bytes()
    assert raw.startswith(b"%PDF-") and raw.count(b"/Type /Page\n") + raw.count(b"/Type /Page ") \
        + raw.count(b"/Type /Page>") >= 1 + len(pngs)


def test_monte_carlo_histograms_redraw_the_recorded_statistics(recorded, capsys):
    root, lib, _ = recorded
    code, out = _run(capsys, ["design", "sink", "--library", lib, "--supply", "12", "--at-current", "20m",
                              "--outputs", "2", "--lot", LOT, "--monte-carlo", "300", "--seed", "5", "--json"])
    design = json.loads(out.out)
    errors, agree = monte_carlo_errors(design)
    assert agree and len(errors) == 2
    for stats, draws in zip(design["monte_carlo"]["outputs"], errors.values()):
        assert draws.size == 300
        assert np.std(draws, ddof=1) == pytest.approx(stats["error"]["std"], rel=1e-9)
        assert np.percentile(draws, 97.5) == pytest.approx(stats["error"]["p97_5"], rel=1e-9)


def test_schematic_carries_the_chosen_values(recorded, capsys):
    root, lib, _ = recorded
    code, out = _run(capsys, ["design", "sink", "--library", lib, "--supply", "12", "--at-current", "20m",
                              "--outputs", "5", "--lot", LOT, "--degeneration", "47", "--json"])
    design = json.loads(out.out)
    texts = " ".join(t.get_text() for t in sink_schematic(design).axes[0].texts)
    assert "12 V" in texts and f"R {design['r_chosen']:g} ohm" in texts and "Rs 47 ohm" in texts
    labels = [o["part"].split("/")[-1] for o in design["outputs"]]
    # five outputs: the first three, a gap naming how many more, and the last
    assert all(label in texts for label in labels[:3] + labels[-1:]) and labels[3] not in texts
    assert "2 more" in texts and design["ref"].split("/")[-1] in texts


def test_duds_are_drawn_apart_and_do_not_stretch_the_axes():
    good = SweepTrace("Q1", (2.9, 3.0, 3.2), (1e-4, 1e-3, 1e-2))
    dud = SweepTrace("Q2", (0.5, 5.0, 9.8), (2e-9, 3e-9, 4e-9), rejected=True)
    fig = sweeps_figure([good, dud], "lot", chosen=["Q1"])
    main_ax, dud_ax = fig.axes
    assert main_ax.get_xlim()[1] < 4 and main_ax.get_ylim()[0] > 1e-6
    assert [line.get_label() for line in dud_ax.get_lines()] == ["Q2"] and dud_ax.get_xlim()[1] >= 9.8


def test_a_matched_set_is_reported_with_its_errors(recorded, capsys, tmp_path):
    root, lib, _ = recorded
    code, out = _run(capsys, ["design", "match", "--library", lib, "--at-current", "20m", "--outputs", "1",
                              "--lot", LOT, "--save", "--json"])
    assert code == 0, out.err
    match = json.loads(out.out)
    code, out = _run(capsys, ["report", "--library", lib, "--lot", LOT, "--design", str(match["design_id"]),
                              "--out", str(tmp_path / "m")])
    assert code == 0, out.err
    page = (tmp_path / "m" / "index.html").read_text(encoding="utf-8")
    best = match["sets"][0]
    assert f"<td class=\"t\">{best['outputs'][0]}</td><td class=\"t\">output</td><td>{best['errors'][0] * 100:+.3f} %" \
        in page
    assert f"worst error {best['worst_error'] * 100:.3f} %" in page and page.count("<figure") == 2 + 3


def test_a_label_that_looks_like_math_is_drawn_as_text():
    # the CLI refuses such labels now, but older libraries and the Python API can hold them: matplotlib would
    # read $...$ as math and fail on this one
    from benchlab.report.figures import png_bytes
    from benchlab.report.part_figures import part_fit_figure

    label = "Q$\\frac{$"
    fig = part_fit_figure(label, [2.9, 3.0, 3.1], [1e-4, 1e-3, 1e-2], DeviceParams("square", vth=2.8, kp=1.0))
    _check_png(png_bytes(fig))
    assert any(t.get_text().startswith(label) for t in fig.axes[0].get_legend().get_texts())
    # while the log axis keeps its powers of ten drawn as math (10^-3, not the text "$\\mathdefault{...}$")
    ticks = fig.axes[0].yaxis.get_major_ticks()
    assert ticks and all(t.label1.get_parse_math() for t in ticks)
    assert any("mathdefault" in t.label1.get_text() for t in ticks)
    design = {"supply": 12.0, "r_chosen": 390.0, "ref": f"{LOT}/{label}", "i_ref": 0.02, "load_voltage": 3.0,
              "outputs": [{"part": f"{LOT}/{label}x", "i_out": 0.02}]}
    _check_png(png_bytes(sink_schematic(design)))


def test_a_pdf_that_cannot_be_written_is_refused_before_anything_is(recorded, capsys, tmp_path):
    root, lib, _ = recorded
    for bad in (tmp_path / "missing" / "r.pdf", tmp_path / "r.png"):
        code, out = _run(capsys, ["report", "--library", lib, "--lot", LOT, "--out", str(tmp_path / "r"),
                                  "--pdf", str(bad)])
        assert code == 2 and out.err.count("\n") == 1 and "--pdf" in out.err
        assert not (tmp_path / "r").exists() and not bad.exists()


def test_a_moved_session_folder_is_named_not_a_failure(recorded, capsys, tmp_path):
    root, lib, _ = recorded
    session = root / "20261202-101500-demo-bag"
    session.rename(root / "moved")
    code, out = _run(capsys, ["report", "--library", lib, "--lot", LOT, "--out", str(tmp_path / "r")])
    assert code == 0, out.err
    page = (tmp_path / "r" / "index.html").read_text(encoding="utf-8")
    assert f"session record not found at {session}" in page
