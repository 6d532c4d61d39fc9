"""Bad files and values a user can hand benchlab: one clear error (one line, no traceback, non-zero exit), nothing
written or powered (CLI in a subprocess). Each case is one a probe turned into a traceback or a silent acceptance."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from newuser_cli import assert_one_clear_error, run
from session_builder import demo_bag, write_session

ROOT = Path(__file__).resolve().parents[2]


def _bench(tmp_path: Path, **replace: str) -> Path:
    """The documented resistor bench, pointed at a closed loopback port, with lines replaced."""
    text = (ROOT / "docs" / "examples" / "bench-resistor.toml").read_text()
    text = text.replace("192.0.2.21::5025", "127.0.0.1::9").replace("192.0.2.22::5025", "127.0.0.1::9")
    for old, new in replace.items():
        assert old in text
        text = text.replace(old, new)
    path = tmp_path / "bench.toml"
    path.write_text(text)
    return path


@pytest.mark.parametrize("old,new", [
    ('settle_s = "50 ms"', "settle_s = 1e300"), ('settle_s = "50 ms"', "settle_s = inf"),
    ('settle_s = "50 ms"', "settle_s = nan"), ('ohms = "10.02 ohm"', "ohms = inf"),
    ('ohms = "10.02 ohm"', "ohms = nan"), ('ohms = "10.02 ohm"', "ohms = 1e300")])
def test_bench_check_refuses_values_no_bench_can_have(tmp_path, old, new):
    result = run("bench", "check", _bench(tmp_path, **{old: new}))
    assert_one_clear_error(result, old.split(" =")[0].rstrip("s"))  # settle_ / ohm (1e300 ohm: over its rating)
    assert len(result.stderr.strip().splitlines()) == 1


def test_bench_check_refuses_non_utf8_and_deeply_nested_files(tmp_path):
    latin = tmp_path / "latin.toml"
    latin.write_bytes(_bench(tmp_path).read_bytes().replace(b"invented example", "caf\u00e9".encode("latin-1")))
    assert_one_clear_error(run("bench", "check", latin), "UTF-8")
    nested = tmp_path / "nested.toml"
    nested.write_text("a = " + "[" * 100_000 + "]" * 100_000 + "\n")
    assert_one_clear_error(run("bench", "check", nested), "nested")


def test_fit_refuses_a_field_beyond_the_csv_limit(tmp_path):
    path = tmp_path / "huge.csv"
    path.write_text("vgs,id\n3.0," + "1" * 200_000 + "\n")  # Python's csv module refuses fields over 131072
    assert_one_clear_error(run("fit", path), "huge.csv")


@pytest.mark.parametrize("kind", ["binary", "utf-16", "latin-1", "long-line", "nan", "empty"])
def test_library_import_refuses_unreadable_or_unfittable_rows_naming_file_and_row(tmp_path, kind):
    session = write_session(tmp_path, "20261202-101500-bag", "bag", demo_bag(2))
    csv_path = session / "Q02.csv"
    text = csv_path.read_text()
    lines = text.splitlines()
    if kind == "binary":
        csv_path.write_bytes(bytes(range(256)) * 4)
    elif kind == "utf-16":
        csv_path.write_bytes(text.encode("utf-16"))
    elif kind == "latin-1":
        csv_path.write_bytes((text + "# caf\u00e9\n").encode("latin-1"))
    elif kind == "long-line":
        csv_path.write_text(text + "41,0," + "9" * 200_000 + ",0.001,1,0.001,ok\n")
    else:  # a row `benchlab fit` refuses: NaN or an empty value in an ok point
        cells = lines[5].split(",")
        cells[2] = "nan" if kind == "nan" else ""
        lines[5] = ",".join(cells)
        csv_path.write_text("\n".join(lines) + "\n")
    db = tmp_path / "lib.db"
    result = run("library", "import", session, "--library", db)
    assert_one_clear_error(result, "Q02.csv")
    if kind in ("nan", "empty"):
        assert "row 5" in result.stderr
        assert_one_clear_error(run("fit", csv_path), "Q02.csv", "row 5")  # the same rule as fit
    assert not db.exists() or "Q01" not in run("parts", "list", "--library", db).stdout  # nothing imported


def test_resume_refuses_a_planned_count_that_is_not_a_number(tmp_path):
    session = write_session(tmp_path, "20261202-101500-bag", "bag", demo_bag(1))
    meta = json.loads((session / "session.json").read_text())
    meta["planned_count"] = "x"
    (session / "session.json").write_text(json.dumps(meta))
    result = run("bag", "--resume", session, "--sim")
    assert_one_clear_error(result, "planned_count")
    assert sorted(p.name for p in session.iterdir()) == ["Q01.csv", "Q01.json", "session.json"]


def test_sim_fault_with_an_infinite_delay_is_refused(tmp_path):
    assert_one_clear_error(run("bag", "--sim", "--count", "1", "--sim-fault", "slow=inf", "--sessions",
                               tmp_path / "s"), "slow")
    assert not (tmp_path / "s").exists()


def test_presweep_check_stops_when_the_instrument_refuses_output_off(tmp_path):
    # docs/sweeps.md: a bench that refuses its settings writes no session
    result = run("bag", "--sim", "--count", "2", "--sim-fault", "error@supply=OUTP", "--sessions", tmp_path / "s")
    assert_one_clear_error(result, "output off")
    assert not (tmp_path / "s").exists()


def test_fit_of_a_sweep_too_short_to_compare_models_beside_a_full_one(tmp_path):
    # textbook square law ID = KP/2 (VGS - VTO)^2 (SPICE level 1), VTO 2.8 V, KP 1 A/V^2
    vgs = np.linspace(3.0, 4.0, 12)
    i_d = 0.5 * (vgs - 2.8) ** 2
    for name, count in (("six.csv", 12), ("few.csv", 3)):
        (tmp_path / name).write_text("vgs,id\n" + "".join(f"{float(v)!r},{float(i)!r}\n" for v, i in zip(vgs[:count], i_d[:count])))
    result = run("fit", tmp_path / "six.csv", tmp_path / "few.csv")
    assert result.returncode == 0 and "Traceback" not in result.stderr, result.stderr
    assert "six" in result.stdout and "few" in result.stdout
    assert "2.80" in result.stdout  # the fitted threshold of the full sweep is the textbook VTO
