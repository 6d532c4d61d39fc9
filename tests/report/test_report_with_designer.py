"""A sink designed by benchlab.design from library parts, recorded, then reported."""

from __future__ import annotations

import pytest

from benchlab.library import Library, import_session
from benchlab.services.library import fit_function
from benchlab.models import DeviceParams
from benchlab.report import build_report, collect

from benchlab.design import parts as design_parts, sink


@pytest.mark.parametrize("source_resistor", [0.0, 22.0])
def test_designed_sink_is_reported_at_its_own_operating_point(tmp_path, source_resistor):
    with Library.open(tmp_path / "lib.db") as lib:
        records = [lib.add_part(f"Q{k}", lot="demo-bag",
                                params=DeviceParams("theta", vth=3.0 + 0.01 * k, kp=1.2, theta=0.08))
                   for k in range(1, 4)]
        parts = [design_parts.Part(r.label, r.params, r.stderr, lot=r.lot, part_id=r.id) for r in records]
        design = sink.synthesize_sink(12.0, 0.02, parts[0], parts[1:],
                                      sink.SinkOptions(source_resistor_ohm=source_resistor, monte_carlo=50))
        design_id = lib.record_design(design.to_dict(), records)
        files = build_report(collect(lib, "demo-bag", design_id), tmp_path / "report")
        html = (tmp_path / "report" / "index.html").read_text()
    op = files.operating_point
    assert op["part"] == "demo-bag/Q1" and op["source_resistor"] == source_resistor
    # the report solves the reference branch again; it lands on the designer's recorded point
    assert op["id"] == pytest.approx(design.i_ref, rel=1e-9) and op["vgs"] == pytest.approx(design.vgs, abs=1e-9)
    text = html_to_text(html)
    # one formatter for the CLI and the report: every figure the CLI prints is in the page as printed
    from benchlab.design.text import format_sink_report, monte_carlo_rows, sink_output_rows, sink_parameter_rows

    cli = format_sink_report(design)
    plain = design.to_dict()
    for name, value in sink_parameter_rows(plain):
        assert value in cli and value in text, name
    for row in sink_output_rows(plain):
        assert all(cell in text for cell in row[:7]) and row[1] in cli and row[2] in cli
    title, rows = monte_carlo_rows(plain)
    assert "Monte Carlo (50 samples" in title and title in text and all(v in text for _, v in rows)
    assert design.cautions and all(caution in text for caution in design.cautions)
    # the drifts are relative changes per kelvin (the designer's %/K), not amperes per kelvin
    assert f"{design.drift_ref_per_k * 100:+.4f} %/K" in text and "A/K" not in text


def html_to_text(page: str) -> str:
    from html.parser import HTMLParser

    chunks = []
    parser = HTMLParser()
    parser.handle_data = chunks.append
    parser.feed(page)
    return "".join(chunks)


def test_fitted_parts_from_an_import_feed_the_designer(tmp_path):
    from session_builder import demo_bag, write_session

    session = write_session(tmp_path, "s1", "demo-bag", demo_bag(4))
    with Library.open(tmp_path / "lib.db") as lib:
        import_session(lib, session, fit_function=fit_function())  # the real fitter: its stderr has keys it could not estimate
        records = lib.parts(lot="demo-bag")
        assert all(r.stderr and all(isinstance(v, float) for v in r.stderr.values()) for r in records)
        parts = [design_parts.Part(r.label, r.params, r.stderr, lot=r.lot, part_id=r.id) for r in records]
        design = sink.synthesize_sink(24.0, 0.05, parts[0], parts[1:3])
        design_id = lib.record_design(design.to_dict(), records[:3])
        assert lib.design(design_id)["ref"] == "demo-bag/Q01"
        assert [p.label for p in lib.parts(lot="demo-bag")] == ["Q04"]
