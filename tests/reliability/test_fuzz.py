"""Hypothesis fuzzing of what reads outside input: the simulator's SCPI parser (any line, as text or bytes over
a real socket), the sweep CSV reader, the library JSON import and the bench-file loader. Each may only refuse
with its own error (one line); nothing else may escape. Each target has a time budget (CI stays fast); the
count of inputs tried is printed and, with ``BENCHLAB_UPDATE_DOCS=1``, written to docs/reliability.md.
"""

from __future__ import annotations

import json
import os
import socket
import time
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from benchlab.errors import BenchlabError
from benchlab.extract.sweepdata import load_sweep_csv
from benchlab.instruments.config import load_bench_config
from benchlab.services.library import import_json_file
from benchlab.sim.bench import SimBench, SimConfig

BUDGET_S = float(os.environ.get("BENCHLAB_FUZZ_SECONDS", "5"))
DOCS = Path(__file__).resolve().parents[2] / "docs" / "reliability.md"
BEGIN, END = "<!-- fuzz counts: begin -->", "<!-- fuzz counts: end -->"
COUNTS: dict[str, int] = {}

SCPI_WORDS = ["*IDN?", "*RST", "*CLS", "*OPC?", "SYST:ERR?", "VOLT", "CURR", "OUTP", "MEAS:VOLT?", "READ?", "INIT",
              "FETC?", "CONF:VOLT:DC", "VOLT:DC:NPLC", "LIST:VOLT", "SIM:PART:NEXT", "SOUR:FUNC", ":", ";", ",", "?",
              " ", "1", "-2.5e3", "MAX", "MIN", "ON", "OFF", '"', "'", "#", "9.9E37", "nan", "\t", "\x00", "\xff"]
scpi_text = st.lists(st.sampled_from(SCPI_WORDS) | st.text(max_size=6), max_size=24).map("".join)
# hypothesis runs in batches of BATCH examples until the target's time budget is spent (see _until_spent)
BATCH = 40
settings_fuzz = settings(max_examples=BATCH, deadline=None, database=None, suppress_health_check=list(HealthCheck))


def _budget(name: str):
    """Counts the examples of ``name``; ``spent()`` is True once its time budget is used up."""
    started = time.monotonic()
    COUNTS[name] = 0

    def spent() -> bool:
        if time.monotonic() - started > BUDGET_S:
            return True
        COUNTS[name] += 1
        return False

    spent.over = lambda: time.monotonic() - started > BUDGET_S
    return spent


def _until_spent(run, spent, what: str = "") -> None:
    """Run the hypothesis test in batches until the time budget is spent (at least one batch); with ``what``,
    anything that escapes fails the test naming it."""
    try:
        run()
        while not spent.over():
            run()
    except Exception as exc:
        if not what:
            raise
        pytest.fail(f"{what} raised {type(exc).__name__}: {exc}")


@pytest.fixture(scope="module")
def sim():
    with SimBench(SimConfig(time_scale=0.0, log_memory_entries=1000)) as bench:
        bench.start(first_port=0)
        yield bench


def test_fuzz_scpi_parser_in_process(sim):
    spent = _budget("SCPI parser (in process, all three instruments)")
    instruments = list(sim.instruments.values())

    @settings_fuzz
    @given(scpi_text, st.integers(0, 2))
    def run(line, which):
        if spent():
            return
        replies = instruments[which].execute(line)  # anything but an exception
        assert all(isinstance(r, str) and "\n" not in r for r in replies)
        with instruments[which].lock:
            instruments[which].status.clear()

    _until_spent(run, spent)
    assert COUNTS["SCPI parser (in process, all three instruments)"] > 100


def test_fuzz_scpi_server_over_tcp(sim):
    spent = _budget("SCPI server (raw bytes over TCP)")
    port = int(sim.resources["meter"].split("::")[2])
    sock = socket.create_connection(("127.0.0.1", port), timeout=5)

    @settings_fuzz
    @given(st.binary(max_size=200))
    def run(data):
        if spent():
            return
        sock.sendall(data.replace(b"\n", b" ") + b"\n*OPC?\n")
        reply = b""
        while not reply.endswith(b"1\n"):  # the server answers the barrier after any line whatever
            chunk = sock.recv(4096)
            assert chunk, "the server closed the connection"
            reply += chunk

    _until_spent(run, spent)
    sock.close()
    assert COUNTS["SCPI server (raw bytes over TCP)"] > 50


CSV_PIECES = ["vgs", "id", "point", "status", "direction", ",", "\n", "\r\n", "ok", "up", "down", "1", "0.001",
              "-1e-9", "nan", "inf", "", '"', "\x00", "\xff", "1e308", "2.5", "probe"]


def test_fuzz_sweep_csv_reader(tmp_path):
    spent = _budget("sweep CSV reader")
    path = tmp_path / "f.csv"

    @settings_fuzz
    @given(st.lists(st.sampled_from(CSV_PIECES) | st.text(max_size=5), max_size=60).map("".join),
           st.sampled_from(["utf-8", "latin-1", "utf-16"]))
    def run(text, encoding):
        if spent():
            return
        path.write_bytes(text.encode(encoding, errors="replace"))
        try:
            load_sweep_csv(path)
        except BenchlabError as exc:
            assert "\n" not in str(exc)

    _until_spent(run, spent, "the CSV reader")


json_values = st.recursive(st.none() | st.booleans() | st.floats() | st.integers() | st.text(max_size=8),
                           lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=8), inner,
                                                                                        max_size=4), max_leaves=20)
export_like = st.fixed_dictionaries({"format": st.sampled_from(["benchlab-library/1", "x"])},
                                    optional={"lots": json_values, "parts": st.lists(
                                        st.dictionaries(st.sampled_from(["label", "lot", "state", "polarity"]),
                                                        json_values), max_size=3),
                                              "sweeps": json_values, "fits": json_values})


def test_fuzz_library_json_import(tmp_path):
    spent = _budget("library JSON import")
    source = tmp_path / "e.json"
    counter = iter(range(10**9))

    @settings_fuzz
    @given(export_like | json_values)
    def run(data):
        if spent():
            return
        source.write_text(json.dumps(data), encoding="utf-8")
        try:
            import_json_file(tmp_path / f"lib{next(counter)}.sqlite", str(source))
        except BenchlabError as exc:
            assert "\n" not in str(exc)

    _until_spent(run, spent, "the JSON import")


TOML_PIECES = ["format_version = 1\n", 'fixture = "resistor"\n', 'fixture = "smu"\n', "[limits]\n",
               'max_supply_v = "12 V"\n', 'max_drain_a = "0.1 A"\n', "max_power_w = 1\n", "[measurement]\n",
               'settle_s = "1 ms"\n', "nplc = 0\n", "[series_resistor]\n", "ohms = 47\n", "ohms = -1\n",
               "[instruments.supply]\n", 'resource = "TCPIP0::127.0.0.1::1::SOCKET"\n',
               'profile = "generic-scpi-supply"\n', "[instruments.meter]\n", 'profile = "../x"\n', "x = [1, {a=2}]\n",
               "nan", "inf", '"', "=", "[", "]", "\n", "1e999"]


def test_fuzz_bench_config_loader(tmp_path):
    spent = _budget("bench-file loader")
    path = tmp_path / "b.toml"

    @settings_fuzz
    @given(st.lists(st.sampled_from(TOML_PIECES) | st.text(max_size=4), max_size=30).map("".join))
    def run(text):
        if spent():
            return
        path.write_text(text, encoding="utf-8")
        try:
            load_bench_config(path)
        except BenchlabError as exc:
            assert "\n" not in str(exc)

    _until_spent(run, spent, "the bench-file loader")


def test_zz_record_counts():
    """Print (and on request write) the number of inputs each target was given."""
    lines = ["| target | inputs tried |", "|---|---|"] + [f"| {name} | {count} |" for name, count in COUNTS.items()]
    print("\n".join(lines))
    if os.environ.get("BENCHLAB_UPDATE_DOCS") == "1" and COUNTS:
        text = DOCS.read_text(encoding="utf-8")
        head, rest = text.split(BEGIN, 1)
        _, tail = rest.split(END, 1)
        DOCS.write_text(f"{head}{BEGIN}\n" + "\n".join(lines) + f"\n{END}{tail}", encoding="utf-8")
