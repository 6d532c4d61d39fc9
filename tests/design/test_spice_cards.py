"""SPICE model cards checked by simulating them in ngspice."""

import subprocess

import pytest

from benchlab.design.parts import Part
from benchlab.design.spice import (model_card, model_library, parse_ngspice_print, sanitize_model_name,
                                   unique_model_names)
from benchlab.errors import InputError
from benchlab.models import DeviceParams

CURRENTS = (250e-6, 5e-3, 0.05)


def _vgs_in_ngspice(ngspice, tmp_path, card, current):
    # An operating point with a current source gives VGS at a fixed current exactly (ngspice manual, .op).
    deck = "\n".join([
        "* card check", f"I1 0 d DC {current}", f"M1 d d 0 0 {card.name} W=1 L=1", card.text,
        ".options RELTOL=1e-7 VNTOL=1e-9 ABSTOL=1e-15", ".control", "op", "print v(d)", ".endc", ".end", ""])
    path = tmp_path / "card.cir"
    path.write_text(deck)
    out = subprocess.run([ngspice, "-b", str(path)], capture_output=True, text=True, timeout=60)
    values = parse_ngspice_print(out.stdout)
    assert "v(d)" in values, out.stdout + out.stderr
    return values["v(d)"]


@pytest.mark.ngspice
@pytest.mark.parametrize("params", [
    DeviceParams("square", 2.8, kp=0.9),
    DeviceParams("theta", 3.1, kp=1.4, theta=0.35),
])
def test_square_and_theta_cards_reproduce_the_fitted_curve_in_ngspice(ngspice_path, tmp_path, params):
    # Outside reference: ngspice level-1 (mos1load.c square law) and level-3 (THETA mobility degradation)
    # at W = L = 1 must give the VGS our model gives at each current.
    card = model_card("Q01", params)
    assert card.level == (1 if params.model == "square" else 3)
    for current in CURRENTS:
        vgs = _vgs_in_ngspice(ngspice_path, tmp_path, card, current)
        assert vgs == pytest.approx(float(params.vgs_at(current)), abs=2e-6)


@pytest.mark.ngspice
def test_linear_card_is_exact_at_its_stated_current(ngspice_path, tmp_path):
    # Linear rule-of-thumb part (common practice; the textbook check values): its square-law equivalent must give the same VGS in
    # ngspice at the current it was built for, and a nearby VGS (within 3 mV) at 1.5x that current.
    params = DeviceParams("linear", 3.9, gm=0.544)
    card = model_card("Q02", params, at_current=8e-3)
    assert _vgs_in_ngspice(ngspice_path, tmp_path, card, 8e-3) == pytest.approx(float(params.vgs_at(8e-3)), abs=2e-6)
    assert abs(_vgs_in_ngspice(ngspice_path, tmp_path, card, 12e-3) - float(params.vgs_at(12e-3))) < 3e-3
    assert "exact only there" in card.text


@pytest.mark.ngspice
def test_ekv_card_matches_in_strong_inversion(ngspice_path, tmp_path):
    # EKV (Enz, Krummenacher, Vittoz 1995): far above threshold the interpolation tends to the theta law,
    # so the level-3 equivalent must agree there; near threshold it must not (weak inversion is dropped).
    params = DeviceParams("ekv", 2.5, kp=0.8, theta=0.1, n=1.5)
    card = model_card("Q03", params)
    assert "weak-inversion" in card.text
    strong = _vgs_in_ngspice(ngspice_path, tmp_path, card, 0.2)  # Vov ~ 0.7 V, about 9 x 2nUT
    assert strong == pytest.approx(float(params.vgs_at(0.2)), abs=1e-3)
    weak = _vgs_in_ngspice(ngspice_path, tmp_path, card, 1e-6)
    assert abs(weak - float(params.vgs_at(1e-6))) > 5e-3


def test_card_fields_and_lambda():
    card = model_card("bag-7/Q 3", DeviceParams("square", 2.0, kp=0.5), lambda_=0.01)
    assert card.name == "bag_7_Q_3"
    assert ".model bag_7_Q_3 NMOS (LEVEL=1 VTO=2 KP=0.5 LAMBDA=0.01 TNOM=27)" in card.text
    pcard = model_card("P1", DeviceParams("square", 2.0, kp=0.5), polarity="P")
    assert "PMOS" in pcard.text and "VTO=-2 " in pcard.text
    with pytest.raises(InputError):
        model_card("X", DeviceParams("square", 2.0, kp=0.5), polarity="Z")


def test_names_are_spice_safe_and_unique():
    assert sanitize_model_name("07") == "M07"
    assert sanitize_model_name("///") == "PART"
    names = unique_model_names(["Q1", "q1", "Q-1", "Q_1"])
    assert len({n.lower() for n in names}) == 4
    assert all(n[0].isalpha() for n in names)


def test_model_library_has_one_card_per_part():
    parts = [Part("A", DeviceParams("square", 2.0, kp=0.5)), Part("B", DeviceParams("theta", 2.1, kp=0.6, theta=0.1))]
    text = model_library(parts)
    assert text.count(".model ") == 2 and "LEVEL=3" in text
