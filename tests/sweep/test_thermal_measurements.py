"""Thermal measurements on the simulated bench: tempco and Rth against the simulator's truth, safety on every exit.

The simulator's parts carry a configured threshold coefficient (drawn per part) and a junction-to-block thermal
resistance (62 K/W); its readings have noise. JEDEC JESD51-1 (Integrated Circuit Thermal Measurement Method -
Electrical Test Method, Single Semiconductor Device) defines the method checked here: a temperature-sensitive
electrical parameter calibrated against temperature (the K-factor), heating at a known power, then
Rth = junction rise / power.
"""

from __future__ import annotations

import json

import pytest

from benchlab.cli import main
from benchlab.errors import SafetyError
from benchlab.services import thermal as svc
from benchlab.services.characterize import SimOptions
from benchlab.sim.bag import make_bag
from benchlab.sim.log import BenchLog

GOOD = [p for p in make_bag(1, 40) if p.kind == "good"]


@pytest.mark.parametrize("part", [p.label for p in GOOD[:5]])
def test_tempco_matches_the_simulator_truth(part, tmp_path):
    truth = next(p for p in GOOD if p.label == part)
    outcome = svc.measure_tempco(part, [25, 60], sim=SimOptions(), sessions_root=tmp_path, bootstrap=20)
    # the tolerance: within 0.3 mV/K of the configured coefficient
    assert outcome.tempco.vth_tempco == pytest.approx(truth.dvth_dt, abs=0.3e-3)
    # the simulator's mobility law is KP ~ T^-1.5 (the ngspice level-1 law it copies)
    assert outcome.tempco.kp_exponent == pytest.approx(1.5, abs=0.1)
    assert outcome.tempco.ztc_vgs > truth.vth_ref  # the crossing lies above threshold
    assert (tmp_path / outcome.session_path.split("/")[-1] / "thermal-tempco.json").is_file()


@pytest.mark.parametrize("part", [p.label for p in GOOD[:6]])
def test_rth_by_the_electrical_method_matches_the_simulator(part, tmp_path):
    outcome = svc.measure_rth(part, sim=SimOptions(seed=1), sessions_root=tmp_path)
    # the tolerance: within 10 % of the configured 62 K/W (JESD51-1: Rth = dTj / P)
    assert outcome.rth.rth == pytest.approx(62.0, rel=0.10)
    assert not outcome.rth.pulsed_dc["flag"]  # DC and pulsed agree through the measured Rth and tempco
    assert outcome.values()["vth_tempco"] is None and outcome.stderrs()["rth"] > 0


def test_heatsink_figure_is_subtracted(tmp_path):
    from benchlab.sweep.thermal_plan import RthPlan

    plain = svc.measure_rth("Q01", sim=SimOptions(), sessions_root=tmp_path)
    sunk = svc.measure_rth("Q01", sim=SimOptions(), sessions_root=tmp_path, plan=RthPlan(heatsink_k_per_w=5.0))
    assert sunk.rth.rth == pytest.approx(plain.rth.rth - 5.0, abs=0.5)


def test_output_off_when_interrupted_while_heating(tmp_path, monkeypatch):
    from benchlab.instruments import thermometer

    real_wait = thermometer.SimClock.wait
    calls = {"heating": 0}

    def wait(self, seconds):
        if seconds == 10.0:  # the heating loop's check interval: the part is powered now
            calls["heating"] += 1
            if calls["heating"] == 3:
                raise KeyboardInterrupt
        real_wait(self, seconds)

    monkeypatch.setattr(thermometer.SimClock, "wait", wait)
    log = tmp_path / "sim.jsonl"
    with pytest.raises(KeyboardInterrupt):
        svc.measure_rth("Q01", sim=SimOptions(log_path=str(log)), sessions_root=tmp_path)
    history = BenchLog.read_file(log)
    assert history.output_was_ever_on("smu") and not history.output_was_left_on()
    readings = [json.loads(line) for line in next(tmp_path.glob("*/thermal.jsonl")).read_text().splitlines()]
    assert any(r.get("what") == "heating" for r in readings)  # what was measured before the stop is on disk


def test_hot_fixture_is_refused_before_anything_is_powered(tmp_path, monkeypatch):
    from benchlab.instruments import thermal_config

    real = thermal_config.simulator_thermal_config

    def cooler_limit(resource):
        from dataclasses import replace
        return replace(real(resource), max_fixture_k=299.0)  # the simulated block sits at 300.15 K

    monkeypatch.setattr(thermal_config, "simulator_thermal_config", cooler_limit)
    log = tmp_path / "sim.jsonl"
    with pytest.raises(SafetyError, match="let it cool"):
        svc.measure_rth("Q01", sim=SimOptions(log_path=str(log)), sessions_root=tmp_path / "s")
    assert not BenchLog.read_file(log).output_was_ever_on()


def test_cli_json_has_every_key_and_bad_input_is_one_error(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert main(["thermal", "tempco", "--part", "Q01", "--temps", "25,120", "--sim", "--json"]) != 0
    err = capsys.readouterr().err
    assert "max_fixture_k" in err and len(err.strip().splitlines()) == 1
    assert not (tmp_path / "sessions").exists()  # nothing written, nothing started
    assert main(["thermal", "rth", "--part", "Q01", "--sim", "--json", "--library", str(tmp_path / "lib.db")]) == 0
    data = json.loads(capsys.readouterr().out)
    assert set(svc.RESULT_KEYS) <= set(data) and set(data["stderr"]) == set(svc.RESULT_KEYS)
    assert data["vth_tempco"] is None and data["rth"] > 0


def test_heating_stays_within_the_bench_limits_and_the_cross_check_can_flag(tmp_path, monkeypatch):
    from dataclasses import replace

    from benchlab.instruments import thermal_config

    real = thermal_config.simulator_thermal_config
    monkeypatch.setattr(thermal_config, "simulator_thermal_config",
                        lambda resource: replace(real(resource), max_junction_k=335.0, max_heating_s=400.0))
    captured = {}
    real_result = svc.rth_result

    def keep(raw, plan):
        captured["raw"] = raw
        return real_result(raw, plan)

    monkeypatch.setattr(svc, "rth_result", keep)
    outcome = svc.measure_rth("Q01", sim=SimOptions(), sessions_root=tmp_path)
    r = outcome.rth
    # the power was lowered so that 62 K/W (the package assumption) keeps the junction under max_junction_k
    assert any("max_junction_k" in note for note in r.notes)
    assert r.reference_k + r.power_w * 62.0 <= 335.0 + 1.0
    assert r.heating_s <= 400.0 + 10.0 and r.power_w <= 1.5
    assert r.rth == pytest.approx(62.0, rel=0.10)  # still right at a smaller rise
    # a DC reading 50 mV away from what Rth and the tempco predict is flagged
    raw = dict(captured["raw"], v_heat_dc=captured["raw"]["v_heat_dc"] + 0.05)
    assert svc.rth_result(raw, svc.RthPlan()).pulsed_dc["flag"]


def test_sigterm_while_heating_leaves_the_output_off(tmp_path):
    import os
    import signal
    import subprocess
    import sys
    import time
    from pathlib import Path

    root = Path(__file__).resolve().parents[2]
    log = tmp_path / "sim.jsonl"
    child = subprocess.Popen([sys.executable, "-m", "benchlab", "thermal", "rth", "--part", "Q01", "--sim",
                              "--sim-time-scale", "0.003", "--sim-log", str(log), "--sessions", str(tmp_path / "s")],
                             cwd=tmp_path, env=dict(os.environ, PYTHONPATH=str(root)), stdout=subprocess.PIPE,
                             stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        found = list(tmp_path.glob("s/*/thermal.jsonl"))
        if found and '"what": "heating"' in found[0].read_text():
            break
        if child.poll() is not None:
            pytest.fail(f"the run ended early: {child.communicate()}")
        time.sleep(0.01)
    else:
        child.kill()
        pytest.fail("heating never started")
    child.send_signal(signal.SIGTERM)
    _, err = child.communicate(timeout=30)
    assert child.returncode != 0 and "SIGTERM" in err
    history = BenchLog.read_file(log)
    assert history.output_was_ever_on("smu") and not history.output_was_left_on()


def _supply_setpoints(history, what: str) -> list[float]:
    """Every voltage (``VOLT``) or current-limit (``CURR``) setpoint the simulated supply received."""
    import re

    found = []
    for line in history.commands("supply"):
        for part in line.split(";"):
            m = re.match(rf"^\s*(?:SOUR(?:CE)?:)?{what}\w*(?::LEV\w*)?(?::IMM\w*)?(?::AMPL\w*)?\s+([-+0-9.eE]+)\s*$",
                         part.strip(), re.IGNORECASE)
            if m:
                found.append(float(m.group(1)))
    return found


def test_rth_on_the_resistor_fixture_matches_the_simulator_and_keeps_to_the_limits(tmp_path):
    """Supply + series resistor + meter: the supply's current limit forces the heating and the sense current
    (constant current, so VGS at the sense current is the JESD51-1 temperature-sensitive parameter); Rth within
    the issue's 10 % of the configured 62 K/W on four parts of the bag, with the simulator's noise."""
    from benchlab.services import characterize as chz

    handle, _ = chz.prepare(None, SimOptions(fixture="resistor", bag_size=40))
    try:
        for truth in GOOD[:4]:
            outcome = svc.measure_rth(truth.label, handle=handle, sessions_root=tmp_path)
            assert outcome.rth.rth == pytest.approx(truth.rth_k_per_w, rel=0.10), truth.label
            assert not outcome.rth.pulsed_dc["flag"]
            assert outcome.rth.power_w <= 1.5 + 1e-9  # the simulator's thermal.max_heating_w
        history = handle.simulator.log
        limits = handle.config.limits
        assert history.output_was_ever_on("supply") and not history.output_was_left_on()
        assert max(_supply_setpoints(history, "VOLT")) <= limits.max_supply_v
        assert max(_supply_setpoints(history, "CURR")) <= limits.max_drain_a
    finally:
        handle.close()


def test_rth_on_the_resistor_fixture_lowers_the_heating_current_to_the_supply_limit(tmp_path):
    from dataclasses import replace

    from benchlab.services import characterize as chz

    handle, _ = chz.prepare(None, SimOptions(fixture="resistor"))
    handle.config = replace(handle.config, limits=replace(handle.config.limits, max_supply_v=12.0))
    try:
        outcome = svc.measure_rth("Q01", handle=handle, sessions_root=tmp_path)
        # 12 V drives at most about (12 - 1.1 x VGS - 0.5) / 47 ohm through the resistor: less than the 1.5 W
        assert any("max_supply_v" in note for note in outcome.rth.notes)
        assert outcome.rth.power_w < 1.0
        assert max(_supply_setpoints(handle.simulator.log, "VOLT")) <= 12.0
        assert outcome.rth.rth == pytest.approx(62.0, rel=0.10)  # still right at a smaller rise
    finally:
        handle.close()


def test_reference_point_warming_is_subtracted_as_jedec_defines_it():
    """JEDEC dictionary, "thermal impedance, junction-to-reference point": Z = (TJf - TJi - dTX) / PH, dTX being
    how much the reference point warmed during heating (jedec.org/standards-documents/dictionary, citing
    JESD24-3 and JESD24-4). Numbers made up for the arithmetic: K = -2 mV/K, a 0.2 V fall = 100 K at 2 W."""
    from benchlab.extract.thermal import rth_electrical

    common = dict(cal_temps_k=[300.0, 340.0], cal_volts=[2.0, 1.92], cal_sigma_v=1e-5, cal_sigma_k=0.01,
                  cold_v=2.0, cooling_t_s=[0.01, 0.02, 0.03, 0.04], cooling_v=[1.8] * 4, power_w=2.0)
    assert rth_electrical(**common)["rth"] == pytest.approx(50.0)
    assert rth_electrical(**common, reference_rise_k=4.0)["rth"] == pytest.approx(48.0)
