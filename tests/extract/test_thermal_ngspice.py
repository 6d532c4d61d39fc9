"""Temperature coefficients and the ZTC point from fits at several temperatures, checked against ngspice.

ngspice's level-3 MOSFET carries its own temperature laws (threshold through PHI and the band gap, mobility as
(T/Tnom)^-1.5: ngspice manual, MOS level 1-3 temperature dependence). The part is simulated at several `.temp`
values; the tool fits each curve and extracts dVth/dT, the mobility exponent and the ZTC point, which are compared
with ngspice's own threshold (`@m1[von]`) and with the crossing of ngspice's own curves.
"""

from __future__ import annotations

import re

import numpy as np
import pytest

from benchlab.extract.thermal import tempco_from_sweeps
from tests.extract.conftest import OPTIONS, _run

T_LOW, T_HIGH = 25.0, 75.0  # degC
KELVIN = 273.15
# body-effect coefficient GAMMA gives the threshold a tempco of a few mV/K through PHI(T), as power parts have
GAMMA_MODEL = ".model NMOD NMOS (LEVEL=3 VTO=2.0 KP=0.05 THETA=0.1 GAMMA=1.5 PHI=0.6)"
# without GAMMA level 3 has no body factor, so KP follows the mobility law alone: m = 1.5
PLAIN_MODEL = ".model NMOD NMOS (LEVEL=3 VTO=2.0 KP=0.05 THETA=0.1 PHI=0.6)"


def _curves(ngspice, folder, model_line, temps_c, stop=8.0):
    blocks = "".join(f"""set temp={t}
dc V1 0.5 {stop} 0.005
let idrain = -1*i(V1)
wrdata t{k}.txt idrain
op
print @m1[von]
""" for k, t in enumerate(temps_c))
    deck = f"""* diode-connected level-3 part at several temperatures
V1 d 0 3
M1 d d 0 0 NMOD W=1 L=1
{model_line}
{OPTIONS}
.control
{blocks}.endc
.end
"""
    out = _run(ngspice, deck, folder, "temps")
    von = [float(v) for v in re.findall(r"@m1\[von\]\s*=\s*([-+0-9.eE]+)", out)]
    curves = [np.loadtxt(folder / f"t{k}.txt") for k in range(len(temps_c))]
    return curves, von


def _bench_points(curve, rng, relative_noise=0.002, step=8):
    """A bench-like subset of points above 1 uA with relative noise on the current (invented noise level)."""
    keep = curve[:, 1] > 1e-6
    vgs, i_d = curve[keep, 0][::step], curve[keep, 1][::step]
    return vgs, i_d * (1.0 + rng.normal(0.0, relative_noise, i_d.size))


def _crossing(cold, hot):
    diff = hot[:, 1] - cold[:, 1]
    k = int(np.nonzero((diff[:-1] > 0) & (diff[1:] <= 0))[0][0])
    frac = diff[k] / (diff[k] - diff[k + 1])
    return cold[k, 0] + frac * (cold[k + 1, 0] - cold[k, 0]), cold[k, 1] + frac * (cold[k + 1, 1] - cold[k, 1])


def test_tempco_and_ztc_match_ngspice_level3(ngspice_path, tmp_path):
    temps_c = [T_LOW, 50.0, T_HIGH]
    curves, von = _curves(ngspice_path, tmp_path, GAMMA_MODEL, temps_c)
    rng = np.random.default_rng(3)
    result = tempco_from_sweeps([_bench_points(c, rng) for c in curves], [t + KELVIN for t in temps_c],
                                temperature_sigma_k=[0.05] * 3, bootstrap=60)
    # ngspice's own threshold at each temperature (its level-3 temperature law), least-squares slope
    truth_tempco = np.polyfit(np.array(temps_c), np.array(von), 1)[0]
    assert truth_tempco < -2e-3  # the deck really has a power-part-like coefficient
    assert result.vth_tempco == pytest.approx(truth_tempco, abs=0.2e-3)  # stated tolerance 0.2 mV/K
    # ngspice's own ZTC point: where its coldest and hottest curves cross (stated tolerance 30 mV, 3 % in ID)
    ztc_vgs, ztc_id = _crossing(curves[0], curves[-1])
    assert result.ztc_vgs == pytest.approx(ztc_vgs, abs=0.03)
    assert result.ztc_id == pytest.approx(ztc_id, rel=0.03)
    assert not result.ztc_extrapolated
    # below the crossing the hot part conducts more (Spirito et al., MIEL 2002): check on ngspice's curves
    below = np.argmin(abs(curves[0][:, 0] - (ztc_vgs - 0.3)))
    assert curves[-1][below, 1] > curves[0][below, 1]


def test_mobility_exponent_matches_the_ngspice_law(ngspice_path, tmp_path):
    temps_c = [T_LOW, T_HIGH]
    curves, _ = _curves(ngspice_path, tmp_path, PLAIN_MODEL, temps_c)
    rng = np.random.default_rng(4)
    result = tempco_from_sweeps([_bench_points(c, rng) for c in curves], [t + KELVIN for t in temps_c],
                                bootstrap=0)
    # ngspice manual: level 1-3 mobility (KP) scales as (T/TNOM)^-1.5; stated tolerance 0.1
    assert result.kp_exponent == pytest.approx(1.5, abs=0.1)


def test_quoted_errors_match_the_scatter_of_repeated_noisy_runs(ngspice_path, tmp_path):
    temps_c = [T_LOW, T_HIGH]
    curves, _ = _curves(ngspice_path, tmp_path, GAMMA_MODEL, temps_c)
    rng = np.random.default_rng(11)
    runs = [tempco_from_sweeps([_bench_points(c, rng, 0.004) for c in curves], [t + KELVIN for t in temps_c],
                               bootstrap=40, seed=k) for k in range(16)]
    for key in ("vth_tempco", "kp_exponent", "ztc_vgs"):
        scatter = float(np.std([getattr(r, key) for r in runs], ddof=1))
        quoted = float(np.mean([r.stderr[key] for r in runs]))
        # 16 runs pin a standard deviation to about +/-18 % (chi-square, 15 degrees of freedom); allow 0.55-1.8
        assert 0.55 < quoted / scatter < 1.8, (key, quoted, scatter)
