"""Fixtures of the extraction tests: ngspice runs of diode-connected parts and meter-like noise."""

from __future__ import annotations

import re
import subprocess
from pathlib import Path

import numpy as np
import pytest

OPTIONS = ".options RELTOL=1e-7 VNTOL=1e-9 ABSTOL=1e-15"  # tight, as reference data needs


def _run(ngspice: str, deck: str, folder: Path, name: str) -> str:
    path = folder / f"{name}.cir"
    path.write_text(deck)
    done = subprocess.run([ngspice, "-b", str(path)], capture_output=True, text=True, timeout=60, cwd=folder)
    # ngspice -b exits with 1 after a .control block even on success ("no simulations run"
    # refers to .print lines), so success is judged by the output the callers parse
    if "error" in done.stderr.lower() and "no simulations run" not in done.stderr.lower():
        raise AssertionError(f"ngspice failed:\n{done.stdout}\n{done.stderr}")
    return done.stdout + done.stderr


class Spice:
    """Runs ngspice decks of one diode-connected NMOS described by a .model line."""

    def __init__(self, ngspice: str, folder: Path):
        self.ngspice = ngspice
        self.folder = folder

    def resistor_sweep(self, model_line: str, resistor: float = 470.0, stop: float = 12.0, step: float = 0.02,
                       geometry: str = "W=1 L=1"):
        """Supply stepped 0..stop through ``resistor`` into the part; returns (v_supply, v_part, i_d)."""
        deck = f"""* diode-connected part on a resistor line
V1 vs 0 0
R1 vs d {resistor}
M1 d d 0 0 NMOD {geometry}
{model_line}
{OPTIONS}
.dc V1 0 {stop} {step}
.control
run
let idrain = -1*i(V1)
wrdata sweep.txt v(d) idrain
.endc
.end
"""
        _run(self.ngspice, deck, self.folder, "sweep")
        # wrdata writes the scale before every vector: vs v(d) vs idrain
        data = np.loadtxt(self.folder / "sweep.txt")
        return data[:, 0], data[:, 1], data[:, 3]

    def vgs_at(self, model_line: str, current: float) -> float:
        """VGS of the part forced to ``current`` by a current source (operating point)."""
        return self.operating_point(model_line, current)["v(d)"]

    def operating_point(self, model_line: str, current: float, extra: tuple[str, ...] = (),
                        geometry: str = "W=1 L=1") -> dict[str, float]:
        """``v(d)`` and the ``extra`` quantities (e.g. ``@m1[gm]``, ``@m1[vth]``) of the part forced to
        ``current`` by a current source (ngspice ``op``)."""
        names = ("v(d)",) + tuple(extra)
        deck = f"""* diode-connected part at a fixed current
I1 0 d DC {current!r}
M1 d d 0 0 NMOD {geometry}
{model_line}
{OPTIONS}
.control
op
print {" ".join(names)}
.endc
.end
"""
        out = _run(self.ngspice, deck, self.folder, "op")
        values = {}
        for name in names:
            match = re.search(re.escape(name) + r"\s*=\s*([-+0-9.eE]+)", out)
            assert match, out
            values[name] = float(match.group(1))
        return values


@pytest.fixture
def spice(ngspice_path, tmp_path) -> Spice:
    return Spice(ngspice_path, tmp_path)


def meter_readings(v_supply, v_part, resistor, rng, floor=1e-6):
    """What a bench would record: both voltages read by a meter with noise, ID from the drop over R.

    Noise of about 20 uV + 10 ppm of reading per voltage reading (a 6.5-digit bench meter
    on a 10 V range, from memory). Points below ``floor`` (the part not yet conducting) are
    dropped, as a sweep would not record them as data.
    """
    def read(v):
        return v + rng.normal(0.0, 20e-6 + 10e-6 * np.abs(v))

    vs, vp = read(v_supply), read(v_part)
    i_d = (vs - vp) / resistor
    keep = i_d > floor
    return vp[keep], i_d[keep]
