"""Helpers for the end-to-end tests: a simulated bench in this process, reached over TCP through pyvisa-py."""

from __future__ import annotations

import contextlib
from dataclasses import replace
from pathlib import Path

from benchlab.instruments.config import simulator_bench_config
from benchlab.services.characterize import BenchHandle, build_plan, connect
from benchlab.sim.bench import SimBench, SimConfig

# The sim's part kinds and the classification the sweep must give them.
EXPECTED_CLASS = {"good": "good", "open": "open", "short": "shorted", "leaky": "leaky"}


@contextlib.contextmanager
def sim_bench(fixture: str = "resistor", *, timeout_ms: int | None = None, **sim_kwargs):
    """Yield ``(sim, handle)``: a started simulator and an open bench connected to it."""
    sim_kwargs.setdefault("time_scale", 0.0)
    sim = SimBench(SimConfig(fixture=fixture, **sim_kwargs))
    try:
        resources = sim.start(first_port=0)
        config = simulator_bench_config(resources, fixture=fixture, series_resistor_ohm=sim.series_resistor_actual_ohm)
        if timeout_ms is not None:
            specs = {role: replace(spec, timeout_ms=timeout_ms) for role, spec in config.instruments.items()}
            config = replace(config, instruments=specs)
        handle = connect(config)
        handle.simulator = sim
        try:
            yield sim, handle
        finally:
            handle.close()
    finally:
        sim.stop()


def plan_for(handle: BenchHandle, **options):
    options.setdefault("points", 12)
    options.setdefault("max_current_a", 0.05)
    return build_plan(handle.config, **options)


def source_role(handle: BenchHandle) -> str:
    return "smu" if handle.config.fixture == "smu" else "supply"


def only_session(root: Path) -> Path:
    folders = [p for p in Path(root).iterdir() if p.is_dir()]
    assert len(folders) == 1, folders
    return folders[0]


def write_bench_file(path: Path, resources: dict, resistor_ohm: float, *, max_drain: str = "500 mA",
                     timeout_ms: int = 2000) -> Path:
    """A bench TOML file for the resistor fixture pointing at a running simulator."""
    path.write_text(f"""format_version = 1
fixture = "resistor"
[limits]
max_supply_v = "12 V"
max_drain_a = "{max_drain}"
max_power_w = "3 W"
[measurement]
settle_s = "0 s"
nplc = 1
[series_resistor]
ohms = {resistor_ohm!r}
[instruments.supply]
resource = "{resources['supply']}"
profile = "generic-scpi-supply"
timeout_ms = {timeout_ms}
[instruments.meter]
resource = "{resources['meter']}"
profile = "generic-scpi-meter"
timeout_ms = {timeout_ms}
""", encoding="utf-8")
    return path
