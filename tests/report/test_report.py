"""The HTML + PNG report of a lot and a design."""

from __future__ import annotations

import base64
import io
import struct
import zlib
from html.parser import HTMLParser

import numpy as np
import pytest
from matplotlib.image import imread

from benchlab.cli import main
from benchlab.library import Library, import_session
from benchlab.models import DeviceParams
from benchlab.report import build_report, collect
from benchlab.report.figures import scatter_figure
from session_builder import demo_bag, write_session

NASTY = "Q<script>alert('x')</script>&amp;"
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (W3C / ISO/IEC 15948), section 5.2


class _Collector(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags, self.text, self.images, self.captions = [], [], [], []
        self._in_caption = False

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        if tag == "img":
            self.images.append(dict(attrs)["src"])
        self._in_caption = tag == "figcaption"

    def handle_endtag(self, tag):
        if tag == "figcaption":
            self._in_caption = False

    def handle_data(self, data):
        self.text.append(data)
        if self._in_caption:
            self.captions.append(data)


def embedded_pngs(images):
    """The PNG bytes of every ``data:`` image (the page must stand alone: no other kind of source)."""
    prefix = "data:image/png;base64,"
    assert all(src.startswith(prefix) for src in images)
    return [base64.b64decode(src[len(prefix):]) for src in images]


@pytest.fixture
def lot_with_design(tmp_path):
    session = write_session(tmp_path, "20261202-101500-demo-bag", "demo-bag", demo_bag(10, duds=(6,)))
    lib = Library.open(tmp_path / "lib.db")
    import_session(lib, session, refit=False)
    ref = lib.add_part("R1", lot="demo-bag", params=DeviceParams("linear", vth=3.9, gm=0.544))
    lib.add_part("Q99", lot="demo-bag", params=DeviceParams("square", vth=3.05, kp=1.0))
    # benchlab refuses such a label now; a library written by an older version may still hold one
    with lib.write() as conn:
        conn.execute("UPDATE parts SET label = ? WHERE label = 'Q99'", (NASTY,))
    design = {"kind": "sink", "supply": 12.0, "r_chosen": 1000.0, "r_exact": 1000.0, "vgs": 3.91486,
              "i_ref": 8.085e-3, "ref": "demo-bag/R1",
              "outputs": [{"part": "demo-bag/Q02", "i_out": 8.1e-3, "error": 0.002}],
              "sets": [["R1", "Q02"]],
              "cautions": ["Power <in the reference part> & heat-sinking: 32 mW", "Eye safety for LED emitters"]}
    design_id = lib.record_design(design, [ref, lib.get_part("demo-bag/Q02")])
    yield lib, design_id
    lib.close()


def _check_png(raw):
    assert raw[:8] == PNG_SIGNATURE
    # first chunk is IHDR: length 13, then width and height (big-endian), CRC-32 over type + data
    length, kind = struct.unpack(">I4s", raw[8:16])
    width, height = struct.unpack(">II", raw[16:24])
    assert (length, kind) == (13, b"IHDR") and width >= 300 and height >= 200
    assert struct.unpack(">I", raw[29:33])[0] == zlib.crc32(raw[12:29])
    pixels = imread(io.BytesIO(raw), format="png")[..., :3]
    not_white = np.any(pixels < 0.95, axis=-1).mean()
    colours = len(np.unique((pixels * 255).astype(np.uint8).reshape(-1, 3), axis=0))
    assert not_white > 0.02 and colours > 20  # drawn content, not a blank canvas


def test_report_files_figures_and_escaped_html(lot_with_design, tmp_path):
    lib, design_id = lot_with_design
    files = build_report(collect(lib, "demo-bag", design_id), tmp_path / "report")
    assert sorted(p.name for p in (tmp_path / "report").iterdir()) == ["index.html"]  # one self-contained file

    page = (tmp_path / "report" / "index.html").read_text(encoding="utf-8")
    parser = _Collector()
    parser.feed(page)
    text = "".join(parser.text)
    pngs = embedded_pngs(parser.images)
    assert len(pngs) == len(files.figures) >= 4
    for raw in pngs:
        _check_png(raw)
    assert "script" not in parser.tags and "b" not in parser.tags
    assert NASTY in text  # shown literally, escaped in the source
    for part in lib.parts(lot="demo-bag", state=None):
        assert part.label in text
    assert "Power <in the reference part> & heat-sinking: 32 mW" in text and "Eye safety for LED emitters" in text
    assert "licensed practice" in text
    assert "open" in text  # the dud's classification shows in the table

    # common practice, no published source: Vth 3.9 V, gm 0.544 A/V on 12 V through 1 kOhm crosses at
    # VGS = 2133.6/545 V and ID = 8.085 mA
    op = files.operating_point
    assert op["vgs"] == pytest.approx(2133.6 / 545, abs=1e-6) and op["id"] == pytest.approx(8.085e-3, abs=1e-6)


def test_scatter_marks_exactly_the_chosen_set(lot_with_design):
    lib, design_id = lot_with_design
    data = collect(lib, "demo-bag", design_id)
    assert data.design_sets == (("R1", "Q02"),) and data.reference.label == "R1"
    fig = scatter_figure([p for p in data.parts if p.state != "rejected"], data.design_sets)
    ax = fig.axes[0]
    everyone, chosen = ax.collections[0], ax.collections[1]
    q02 = lib.get_part("demo-bag/Q02").params
    # R1 is a linear-model part (no KP), so only Q02 of the set sits on the KP axis
    assert np.allclose(chosen.get_offsets(), [[q02.vth, q02.kp]])
    assert len(everyone.get_offsets()) == 10  # 9 good swept parts + the hand-entered square-law part


def test_report_command_and_its_errors(lot_with_design, tmp_path, capsys):
    lib, design_id = lot_with_design
    out = tmp_path / "cli-report"
    assert main(["report", "--lot", "demo-bag", "--out", str(out), "--library", lib.path]) == 0
    assert (out / "index.html").exists() and "Operating point" not in (out / "index.html").read_text()
    capsys.readouterr()
    assert main(["report", "--lot", "nope", "--out", str(out), "--library", lib.path]) == 2
    err = capsys.readouterr().err
    assert "lot 'nope' has no parts" in err and err.count("\n") == 1
    assert main(["report", "--lot", "demo-bag", "--design", "99", "--out", str(out), "--library", lib.path]) == 2
    assert "no design 99" in capsys.readouterr().err
    # a design whose parts are all in another lot: said plainly, no half-marked report written
    lib.add_part("X1", lot="other-bag", params=DeviceParams("square", vth=3.0, kp=1.0))
    elsewhere = tmp_path / "elsewhere"
    assert main(["report", "--lot", "other-bag", "--design", str(design_id), "--out", str(elsewhere),
                 "--library", lib.path]) == 2
    err = capsys.readouterr().err
    assert "none of lot 'other-bag'" in err and "'demo-bag'" in err and err.count("\n") == 1
    assert not elsewhere.exists()


def test_reference_named_by_the_design_leads_its_set(tmp_path):
    with Library.open(tmp_path / "lib.db") as lib:
        out = lib.add_part("Q1", lot="bag", params=DeviceParams("square", vth=3.0, kp=1.0))
        ref = lib.add_part("Q2", lot="bag", params=DeviceParams("square", vth=3.1, kp=1.1))
        design_id = lib.record_design({"supply": 12.0, "r_chosen": 1000.0, "ref": "bag/Q2"}, [out, ref])
        data = collect(lib, "bag", design_id)
    assert data.reference.label == "Q2" and data.design_sets == (("Q2", "Q1"),)


def test_sweep_overlay_leaves_out_the_search_below_the_detection_current(tmp_path):
    from session_builder import sweep_points

    params = DeviceParams("square", vth=3.0, kp=1.0)
    vgs, ids = sweep_points(params, count=20, i_min=1e-5)
    noise_v, noise_i = [0.5, 1.0, 1.5], [2e-9, 5e-9, 3e-9]  # the search before the part conducted
    session = write_session(tmp_path, "s", "bag", [
        {"label": "Q1", "vgs": [*noise_v, *vgs], "id": [*noise_i, *ids]},
        {"label": "Q2", "vgs": [*noise_v, 9.0], "id": [*noise_i, 4e-9], "classification": "open"}])
    for label in ("Q1", "Q2"):  # the plan's detection current, as the sweep engine records it
        sidecar = session / f"{label}.json"
        sidecar.write_text(sidecar.read_text().replace('"resistor_ohm": 100.0', '"detect_current_a": 1e-6'))
    with Library.open(tmp_path / "lib.db") as lib:
        import_session(lib, session, refit=False)
        assert lib.sweeps("Q1")[0]["detect_current_a"] == 1e-6
        data = collect(lib, "bag")
    traces = {t.label: t for t in data.traces}
    assert len(traces["Q1"].id) == 20 and min(traces["Q1"].id) >= 1e-6
    assert traces["Q2"].rejected and len(traces["Q2"].id) == 4  # a dud is drawn whole: its floor is the finding
