"""Designs that are wrong say so: a one-line verdict on every sink design, a reference below what a sweep detects is
refused, supply sensitivity and thermal runaway reach the verdict (CLI in subprocesses, inline invented parts)."""

from __future__ import annotations

import json

import pytest
from newuser_cli import assert_one_clear_error, run


def _sink(*args):
    return run("design", "sink", *args)


def test_a_mismatched_design_ends_with_a_verdict_that_names_the_fix(tmp_path):
    # linear model (textbook small-signal line) ID = gm (VGS - Vth): an output 50 mV below the reference's
    # threshold carries gm * 50 mV more than the reference, an error of gm * dVth / I_ref
    args = ["--supply", "12", "--at-current", "0.02", "--ref-model", "vth=3.9,gm=0.544",
            "--output-model", "vth=3.85,gm=0.544", "--load-voltage", "6"]
    result = _sink(*args)
    assert result.returncode == 0, result.stderr
    verdict = [line for line in result.stdout.splitlines() if line.startswith("VERDICT")]
    assert len(verdict) == 1 and "NOT USABLE AS IS" in verdict[0] and "misses the 5 % mismatch target" in verdict[0]
    assert "--mismatch-target 0.05" in verdict[0] and "benchlab design match" in verdict[0]
    data = json.loads(_sink(*args, "--json").stdout.splitlines()[0])
    assert data["worst_error"] == pytest.approx(0.544 * 0.05 / data["i_ref"], rel=1e-9)
    assert data["verdict"] == verdict[0].removeprefix("VERDICT  ")
    # a looser target is met; the target option changes the verdict's figure
    result = _sink("--supply", "12", "--at-current", "0.02", "--ref-model", "vth=3.9,gm=0.544",
                   "--output-model", "vth=3.899,gm=0.544", "--load-voltage", "6")
    assert "VERDICT  usable: meets the 5 % mismatch target" in result.stdout


def test_degeneration_from_the_mismatch_target_makes_the_verdict_pass(tmp_path):
    result = _sink("--supply", "24", "--at-current", "0.02", "--ref-model", "vth=3.9,kp=1.0",
                   "--output-model", "vth=3.85,kp=1.0", "--load-voltage", "12", "--mismatch-target", "0.02")
    assert result.returncode == 0, result.stderr
    assert "VERDICT  usable: meets the 2 % mismatch target" in result.stdout


def test_a_reference_below_what_a_sweep_detects_is_refused():
    # 2 V cannot open a part whose threshold is 3.9 V: the old analysis printed 2.3 pA and a 10920 % error
    result = _sink("--supply", "2", "--resistor", "100", "--ref-model", "vth=3.9,kp=1.0",
                   "--output-model", "vth=3.8,kp=1.0", "--load-voltage", "2")
    assert_one_clear_error(result, "below the 2 uA", "raise the supply")


def test_supply_sensitivity_above_five_percent_per_volt_is_in_the_verdict():
    # linear model on a resistor line: I = (Vs - Vth) / (R + 1/gm), so dI/dVs / I = 1 / (Vs - Vth) = 125 %/V at
    # 3.3 V and Vth 2.5 V (the closed form of the textbook line)
    result = _sink("--supply", "3.3", "--resistor", "100", "--ref-model", "vth=2.5,gm=0.5",
                   "--output-model", "vth=2.5,gm=0.5", "--load-voltage", "3")
    assert result.returncode == 0, result.stderr
    assert "follow the supply by 125.0 %/V" in result.stdout


def test_thermal_runaway_is_found_without_a_thermal_resistance_option():
    # 24 V x 0.3 A = 7.2 W in a free-standing package (the cautions' 62 K/W assumption) cannot settle
    result = _sink("--supply", "24", "--at-current", "0.3", "--ref-model", "vth=3.9,gm=0.544",
                   "--output-model", "vth=3.9,gm=0.544", "--load-voltage", "24")
    assert result.returncode == 0, result.stderr
    verdict = [line for line in result.stdout.splitlines() if line.startswith("VERDICT")][0]
    assert "do not settle" in verdict and "62 K/W" in result.stdout


def test_design_match_lists_no_set_with_an_output_that_does_not_conduct(tmp_path):
    db = tmp_path / "lib.db"
    # square law ID = KP/2 (VGS - VTO)^2 (SPICE level 1): at 1 mA a 3.0 V part sits at 3.045 V, where a 3.5 V part
    # carries nothing (invented parts)
    for label, vth in (("A", 3.0), ("B", 3.0005), ("C", 3.5)):
        assert run("parts", "add", label, "--lot", "bag", "--vth", vth, "--kp", 1, "--library", db).returncode == 0
    for outputs in (1, 2):
        result = run("design", "match", "--at-current", "0.001", "--outputs", outputs, "--library", db)
        assert result.returncode == 0, result.stderr
        assert "-100.000 %" not in result.stdout and "-99.9" not in result.stdout
    result = run("design", "match", "--at-current", "0.001", "--outputs", 1, "--library", db)
    # C is left alone once A and B are paired: one part cannot make a pair (the text blamed its conduction)
    assert "1 part(s) left over: too few for another set of 2" in result.stdout
