"""Physics of the simulated part, checked against published laws and against ngspice.

Pure-function checks first, then the same behaviour seen over TCP through the instruments.
"""

from __future__ import annotations

import json
import math
import subprocess
from dataclasses import replace

import numpy as np
import pytest

from benchlab.sim import parse_truth_reply
from benchlab.sim.bag import make_bag
from benchlab.sim.fixture import solve_resistor_fixture
from benchlab.sim.physics import (
    BOLTZMANN_OVER_CHARGE, PartPhysics, kp_at, part_current, threshold_at,
    voltage_at_current,
)
from tests.sim.conftest import open_client

T0 = 300.15


def make_part(**changes) -> PartPhysics:
    base = PartPhysics(label="QX", kind="good", vth_ref=3.0, kp_ref=2.5, theta=0.2, slope_n=1.5,
                       leak_siemens=1e-10, dvth_dt=-5e-3)
    return replace(base, **changes)


def test_current_is_zero_at_zero_volts_and_monotonic():
    # EKV (Enz, Krummenacher, Vittoz 1995, eq. for I = IF - IR): with VD = VS the forward and
    # reverse currents cancel, so a diode-connected part carries nothing at 0 V
    part = make_part()
    assert part_current(part, 0.0, T0) == 0.0
    volts = np.linspace(-1.0, 8.0, 901)
    currents = np.array([part_current(part, v, T0) for v in volts])
    assert np.all(np.diff(currents) > 0)


def test_strong_inversion_limit_is_the_theta_law():
    # Enz-Krummenacher-Vittoz 1995: strong-inversion limit (beta/2n) Vov^2 = (KP/2) Vov^2 with beta = n KP;
    # mobility degradation divides by 1 + THETA Vov (SPICE level-3 THETA)
    part = make_part()
    for vov in (1.0, 2.0, 3.0):
        expected = 0.5 * 2.5 * vov ** 2 / (1 + 0.2 * vov)
        assert part_current(part, 3.0 + vov, T0) == pytest.approx(expected, rel=2e-3)


def test_subthreshold_slope_is_n_ut_ln10():
    # Enz-Krummenacher-Vittoz 1995: weak inversion ID ~ exp(Vov / (n UT)), so S = n UT ln 10 per decade
    part = make_part(leak_siemens=0.0)
    ut = BOLTZMANN_OVER_CHARGE * T0
    v1, v2 = 3.0 - 0.45, 3.0 - 0.30
    slope = (v2 - v1) / math.log10(part_current(part, v2, T0) / part_current(part, v1, T0))
    assert slope == pytest.approx(1.5 * ut * math.log(10), rel=0.01)


def test_temperature_laws():
    # ngspice level-1 mobility law KP ~ (T/T0)^-1.5 (ngspice manual, MOS level 1 temperature dependence);
    # threshold falls by a few mV/K (power-MOSFET datasheet coefficients, -2 to -8 mV/K, common practice)
    part = make_part()
    assert kp_at(part, 2 * T0) == pytest.approx(2.5 * 2 ** -1.5)
    assert threshold_at(part, T0 + 50) == pytest.approx(3.0 - 0.25)
    # below the zero-temperature-coefficient overdrive (about 2 alpha T / m = 2 V here, derived from the
    # two laws) a hotter part conducts more; far above it, less
    assert part_current(part, 3.3, T0 + 30) > part_current(part, 3.3, T0)
    assert part_current(part, 7.5, T0 + 30) < part_current(part, 7.5, T0)


def test_zero_temperature_coefficient_point():
    # with KP ~ T^-1.5 and dVT/dT = -alpha, the square law has d ln ID / dT = -1.5/T + 2 alpha / Vov, zero at
    # Vov = 2 alpha T / 1.5 (derived from the two laws; the ZTC point behind power-MOSFET thermal instability,
    # Spirito et al., MIEL 2002, doi:10.1109/MIEL.2002.1003144)
    from scipy.optimize import brentq

    part = make_part(theta=0.0, slope_n=1.0, leak_siemens=0.0)

    def temperature_slope(volts: float) -> float:
        return part_current(part, volts, T0 + 0.5) - part_current(part, volts, T0 - 0.5)

    ztc = brentq(temperature_slope, 3.5, 8.0)
    assert ztc - 3.0 == pytest.approx(2 * 5e-3 * T0 / 1.5, rel=2e-3)


def test_duds():
    # common practice: an open part conducts nothing, a shorted one shows ~0 V at any current,
    # a leaky one conducts well below threshold
    assert part_current(make_part(kind="open"), 10.0, T0) < 1e-9
    assert voltage_at_current(make_part(kind="short"), 0.5, T0) < 0.05
    assert part_current(make_part(kind="leaky", leak_siemens=2e-4), 1.0, T0) > 1e-4
    assert voltage_at_current(make_part(kind="open"), 0.01, T0, ceiling_v=30.0) == math.inf


def test_inverse_round_trip():
    part = make_part()
    for amps in (1e-9, 1e-6, 250e-6, 0.1, 1.0):
        volts = voltage_at_current(part, amps, T0)
        assert part_current(part, volts, T0) == pytest.approx(amps, rel=1e-9)


@pytest.mark.ngspice
@pytest.mark.parametrize("level, theta", [(1, 0.0), (3, 0.3)])
def test_resistor_line_solution_matches_ngspice(ngspice_path, tmp_path, level, theta):
    # ngspice MOSFET on the same resistor line. Level 1: Beta = KP W/L, saturation Beta/2 Vov^2. Level 3 with
    # THETA (and its defaults: no body effect, no velocity saturation, no weak-inversion term): saturation
    # (KP/2) Vov^2 / (1 + THETA Vov), the law the simulated part bends by. Our EKV part with n = 1 and no
    # leakage has the same strong-inversion law, so the operating points must agree (ngspice-39, tolerances
    # tightened as /work/shared notes advise)
    part = make_part(theta=theta, slope_n=1.0, leak_siemens=0.0, vth_ref=2.5, kp_ref=1.0)
    deck = tmp_path / "line.cir"
    out = tmp_path / "out.txt"
    deck.write_text(f"""* diode-connected part on a resistor line
V1 vs 0 0
R1 vs d 10
M1 d d 0 0 NMOD W=100u L=100u
.model NMOD NMOS (LEVEL={level} VTO=2.5 KP=1.0{f" THETA={theta}" if level == 3 else ""})
.options RELTOL=1e-7 VNTOL=1e-9 ABSTOL=1e-15
.dc V1 4 14 1
.control
run
let idrain = -1*i(V1)
wrdata out.txt v(d) idrain
.endc
.end
""")
    # run in tmp_path: ngspice parses a "-" in a wrdata path as a minus sign; ngspice-39 in batch mode
    # exits 1 after a .control block even when it ran, so the output file is the proof it worked
    run = subprocess.run([ngspice_path, "-b", deck.name], capture_output=True, text=True, timeout=60, cwd=tmp_path)
    assert out.exists(), run.stdout + run.stderr
    rows = np.loadtxt(out)
    assert len(rows) == 11
    for supply_v, part_v, _, spice_i in rows:
        point = solve_resistor_fixture(part, T0, supply_v, 10.0, 10.0)
        assert point.part_v == pytest.approx(part_v, abs=2e-4)
        assert point.part_i == pytest.approx(spice_i, rel=2e-4)
    if theta:
        # the bend is really there: at the top of the sweep the square law alone would carry far more
        top_v = rows[-1][1]
        assert 0.5 * (top_v - 2.5) ** 2 > 1.3 * rows[-1][3]


def test_supply_goes_constant_current_at_its_limit():
    part = make_part()
    point = solve_resistor_fixture(part, T0, 30.0, 0.2, 47.0)
    assert point.supply_mode == "CC"
    assert point.part_i == pytest.approx(0.2)
    assert part_current(part, point.part_v, T0) == pytest.approx(0.2, rel=1e-9)
    assert point.supply_v == pytest.approx(point.part_v + 0.2 * 47.0)


def test_bag_is_seeded_and_has_duds():
    bag = make_bag(seed=3, size=40)
    assert bag == make_bag(seed=3, size=40)
    assert bag != make_bag(seed=4, size=40)
    assert [p.label for p in bag[:3]] == ["Q01", "Q02", "Q03"]
    kinds = [p.kind for p in bag]
    assert kinds.count("open") == kinds.count("short") == kinds.count("leaky") == 2
    good = [p for p in bag if p.kind == "good"]
    vth = np.array([p.vth_ref for p in good])
    # power-MOSFET-like spread: datasheet VGS(th) windows of 2-4 V (common practice)
    assert 2.0 <= vth.min() and vth.max() <= 4.0 and vth.std() > 0.1


# ---------------------------------------------------------------------------- over TCP


def _smu(make_bench, rm, **kwargs):
    bench = make_bench(fixture="smu", **kwargs)
    return bench, open_client(rm, bench.resources["smu"])


def _sweep_list(smu, function: str, levels, compliance: float, dwell: float = 0.0, nplc: float = 1.0):
    limit = "CURR:LIM" if function == "VOLT" else "VOLT:LIM"  # the compliance: the other quantity's SOURce limit
    smu.write(f"FUNC:MODE {function};:{limit} {compliance};:SENS:CURR:NPLC {nplc}")
    smu.write(f"LIST:{function} " + ",".join(f"{x:.6g}" for x in levels))
    smu.write(f"LIST:DWEL {dwell};:{function}:MODE LIST;:OUTP ON")
    smu.write("INIT")
    assert smu.query("*OPC?") == "1"
    data = np.array([float(x) for x in smu.query("TRAC:DATA?").split(",")]).reshape(-1, 2)
    assert smu.query("OUTP OFF;*OPC?") == "1"
    return data[:, 0], data[:, 1]


def test_iv_curve_over_tcp_is_monotonic(make_bench, rm):
    # above the noise floor (50 pA) and below compliance every step up in VGS raises the current
    bench, smu = _smu(make_bench, rm)
    truth = parse_truth_reply(smu.query("SIM:PART:TRUT?"))
    levels = np.linspace(truth["vth_ref"] - 0.3, truth["vth_ref"] + 0.5, 41)
    volts, amps = _sweep_list(smu, "VOLT", levels, 1.0, nplc=10)
    assert len(smu.query("FETC:ARR:CURR?").split(",")) == 41  # SCPI-1999 FETCh:ARRay: one value per reading
    assert np.all(np.diff(amps) > 0)
    assert amps[0] < 1e-4 < 0.1 < amps[-1] < 1.0
    assert bench.log.output_history("smu") == [True, False]


def test_self_heating_raises_current_at_fixed_vgs(make_bench, rm):
    # below the zero-temperature-coefficient point a hotter power MOSFET conducts more (Spirito et al.,
    # MIEL 2002, doi:10.1109/MIEL.2002.1003144); the junction heats with P Rth over the thermal time constant
    bench, smu = _smu(make_bench, rm)
    truth = parse_truth_reply(smu.query("SIM:PART:TRUT?"))
    vgs = truth["vth_ref"] + 0.3
    volts, amps = _sweep_list(smu, "VOLT", [vgs] * 12, 1.0, dwell=10.0)
    assert np.all(np.diff(amps) > 0)
    assert amps[0] < amps[-1] < 1.0
    assert amps[-1] > 1.2 * amps[0]
    assert float(smu.query("SIM:TEMP?")) > 300.15 + 10  # 2 minutes of ~0.3 W at 62 K/W


def test_threshold_falls_with_junction_temperature(make_bench, rm):
    # VGS at a small fixed current falls as the junction warms (datasheet VGS(th) temperature
    # coefficient of a few mV/K; common practice)
    bench, smu = _smu(make_bench, rm)
    truth = parse_truth_reply(smu.query("SIM:PART:TRUT?"))
    cold_v, _ = _sweep_list(smu, "CURR", [1e-3], 20.0)
    _sweep_list(smu, "VOLT", [truth["vth_ref"] + 0.6], 1.0, dwell=60.0)  # heat it
    hot_temperature = float(smu.query("SIM:TEMP?"))
    hot_v, _ = _sweep_list(smu, "CURR", [1e-3], 20.0)
    shift = hot_v[0] - cold_v[0]
    rise = hot_temperature - 300.15
    assert rise > 20
    assert shift < 0
    assert shift / rise == pytest.approx(truth["dvth_dt"], rel=0.25)


def test_subthreshold_slope_over_tcp_matches_n(make_bench, rm):
    # S = n UT ln 10 (Enz, Krummenacher, Vittoz 1995), measured by forcing decades of current
    bench, smu = _smu(make_bench, rm)
    truth = parse_truth_reply(smu.query("SIM:PART:TRUT?"))
    currents = np.logspace(-7, -5, 9)
    volts, amps = _sweep_list(smu, "CURR", currents, 20.0, nplc=10)
    slope = np.polyfit(np.log10(amps), volts, 1)[0]
    expected = truth["slope_n"] * BOLTZMANN_OVER_CHARGE * 300.15 * math.log(10)
    assert slope == pytest.approx(expected, rel=0.05)


def test_duds_over_tcp(make_bench, rm):
    # common practice: open -> ~0 A at any voltage; shorted -> ~0 V at any current;
    # leaky -> current well above zero below threshold
    bench, smu = _smu(make_bench, rm)
    seen = set()
    while smu.query("SIM:PART:IND?") != "-1":
        truth = parse_truth_reply(smu.query("SIM:PART:TRUT?"))
        if truth["kind"] == "open":
            _, amps = _sweep_list(smu, "VOLT", [2.0, 6.0, 10.0], 0.5)
            assert np.all(np.abs(amps) < 1e-8)
        elif truth["kind"] == "short":
            volts, _ = _sweep_list(smu, "CURR", [0.01, 0.1, 0.5], 20.0)
            assert np.all(np.abs(volts) < 0.02)
        elif truth["kind"] == "leaky":
            _, amps = _sweep_list(smu, "VOLT", [truth["vth_ref"] - 1.0], 0.5)
            assert amps[0] > 50e-6
        elif len(seen) < 3 and "good" not in seen:
            _, amps = _sweep_list(smu, "VOLT", [truth["vth_ref"] - 1.0], 0.5)
            assert amps[0] < 1e-6
        seen.add(truth["kind"])
        smu.write("SIM:PART:NEXT")
    assert seen == {"good", "open", "short", "leaky"}


def test_part_change_requires_output_off_and_bag_runs_out(make_bench, rm):
    bench, smu = _smu(make_bench, rm, bag_size=2)
    assert smu.query("SIM:PART:IND?;LAB?") == '0;"Q01"'
    smu.write("OUTP ON;:SIM:PART:NEXT")
    assert int(smu.query("SYST:ERR?").split(",")[0]) == -221
    smu.write("OUTP OFF;:SIM:PART:NEXT")
    assert smu.query("SIM:PART:LAB?") == '"Q02"'
    smu.write("SIM:PART:NEXT")
    assert smu.query("SIM:PART:IND?") == "-1"
    assert json.loads(smu.query("SIM:PART:TRUT?").strip('"')) == {}


def test_resistor_fixture_kirchhoff(make_bench, rm):
    # Kirchhoff's voltage law on the line: V_supply = V_part + I R_actual
    bench = make_bench(fixture="resistor", rth_k_per_w=0.0)
    supply = open_client(rm, bench.resources["supply"])
    meter = open_client(rm, bench.resources["meter"])
    assert supply.query("CURR 1;VOLT 12;OUTP ON;*OPC?") == "1"
    meter.write("VOLT:NPLC 10;:CURR:NPLC 10")
    part_v = float(meter.query("MEAS:VOLT?"))
    part_i = float(meter.query("MEAS:CURR?"))
    supply_v = float(supply.query("MEAS:VOLT?"))
    # regulation state: SCPI-1999 STATus:QUEStionable:CONDition?, bit 1 (CURRent) set only at the current limit
    assert supply.query("STAT:QUES:COND?") == "0"
    assert supply_v == pytest.approx(part_v + part_i * bench.series_resistor_actual_ohm, abs=5e-3)
    assert supply.query("CURR 0.05;*OPC?") == "1"
    assert supply.query("STAT:QUES:COND?") == "2"
    assert float(meter.query("MEAS:CURR?")) == pytest.approx(0.05, rel=1e-3)
    assert supply.query("OUTP OFF;*OPC?") == "1"
    assert not bench.log.output_was_left_on()


def test_meter_noise_scales_with_one_over_sqrt_nplc(make_bench, rm):
    # white noise averaged over the integration time: sigma ~ 1/sqrt(T) (common practice)
    bench = make_bench()
    meter = open_client(rm, bench.resources["meter"])

    def spread(nplc: float) -> float:
        meter.write(f"CONF:VOLT 10;:VOLT:NPLC {nplc}")
        return float(np.std([float(meter.query("READ?")) for _ in range(60)]))

    ratio = spread(0.1) / spread(10.0)
    assert 6.0 < ratio < 16.0  # sqrt(100) = 10
