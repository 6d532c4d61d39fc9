"""Smaller defects a new user met (CLI in subprocesses): messages that repeat or mislead, duds treated alike."""

from __future__ import annotations

import re
from pathlib import Path

from newuser_cli import assert_one_clear_error, run, start
from session_builder import demo_bag, write_session

ROOT = Path(__file__).resolve().parents[2]


def test_import_of_a_folder_that_does_not_exist_says_so(tmp_path):
    assert_one_clear_error(run("library", "import", tmp_path / "nope", "--library", tmp_path / "l.db"),
                           "no such folder")


def test_an_unknown_profile_is_named_once(tmp_path):
    text = (ROOT / "docs" / "examples" / "bench-resistor.toml").read_text()
    text = text.replace('profile = "generic-scpi-meter"', 'profile = "nope-meter"')
    (tmp_path / "b.toml").write_text(text)
    result = run("bench", "check", tmp_path / "b.toml")
    assert_one_clear_error(result, "instruments.meter.profile", "no profile named 'nope-meter'")
    assert result.stderr.count("key ") == 1


def test_duds_print_no_threshold_and_fit_skips_every_dud_alike(tmp_path):
    result = run("bag", "--sim", "--count", "3", "--sessions", tmp_path / "s")  # the seed-1 bag's Q03 is a dud
    assert result.returncode == 0, result.stderr
    duds = [line for line in result.stdout.splitlines() if re.match(r"Q\d+: (open|shorted|leaky|unstable),", line)]
    assert duds and all("VGS=" not in line and "no threshold" in line for line in duds)
    bag = demo_bag(3)
    bag[1].update(classification="shorted", reason="carries 250 mA with 12 mV across it")  # still has a curve
    bag[2].update(classification="open", reason="no current")
    session = write_session(tmp_path, "20261202-101500-bag", "bag", bag)
    result = run("fit", session)
    assert result.returncode == 0, result.stderr
    assert "Q01" in result.stdout and "Q02" not in result.stdout and "Q03" not in result.stdout
    assert "skipped Q02 (classified shorted)" in result.stderr and "skipped Q03 (classified open)" in result.stderr


def test_bag_on_a_standalone_simulator_advances_the_bag(tmp_path):
    sim = start("sim", "--port", "0")
    try:
        lines = dict(sim.stdout.readline().strip().split(" ", 1) for _ in range(4))
        ohms = lines["series_resistor"].split()[0]
        float(ohms)  # the actual value the bench file needs
        text = (ROOT / "docs" / "examples" / "bench-resistor.toml").read_text()
        text = (text.replace("TCPIP0::192.0.2.21::5025::SOCKET", lines["supply"])
                .replace("TCPIP0::192.0.2.22::5025::SOCKET", lines["meter"])
                .replace('ohms = "10.02 ohm"', f'ohms = "{ohms} ohm"').replace('power_rating_w = "5 W"',
                                                                           'power_rating_w = "50 W"'))
        (tmp_path / "bench.toml").write_text(text)
        result = run("bag", "--bench", tmp_path / "bench.toml", "--count", "2", "--sessions", tmp_path / "s")
        assert result.returncode == 0, result.stderr
        swept = re.findall(r"^(Q\d+): ", result.stdout, flags=re.M)
        assert swept == ["Q01", "Q02"]  # the same part twice before: nothing loaded the next one
    finally:
        sim.terminate()
        sim.wait(timeout=30)
        assert sim.returncode == 0
        sim.stdout.close()
        sim.stderr.close()


def test_an_unreachable_loopback_bench_says_connecting_and_hints_at_the_simulator(tmp_path):
    text = (ROOT / "docs" / "examples" / "bench-resistor.toml").read_text()
    text = text.replace("192.0.2.21::5025", "127.0.0.1::9").replace("192.0.2.22::5025", "127.0.0.1::9")
    (tmp_path / "bench.toml").write_text(text)
    result = run("bag", "--bench", tmp_path / "bench.toml", "--count", "1", "--sessions", tmp_path / "s")
    assert_one_clear_error(result, "connecting to supply at TCPIP0::127.0.0.1::9::SOCKET", "benchlab sim")
    assert not (tmp_path / "s").exists()
