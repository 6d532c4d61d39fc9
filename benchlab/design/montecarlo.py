"""Seeded Monte Carlo of a current sink over resistor tolerance and fit uncertainties.

Resistors are drawn uniformly inside their tolerance band (a worst-case-like choice; real
resistor lots are often narrower). Each part's fitted parameters are drawn together from a
multivariate normal law with the fit's full covariance: its standard errors and the correlation
coefficients the fitter stores beside them (``corr_<a>_<b>`` in ``stderr``; a threshold and KP
fitted to one sweep are strongly correlated, and drawing them independently misstates a mirror's
spread). A part stored without correlations (an older library, a hand entry) is drawn with
independent parameters. The law is truncated to the parameters' valid ranges (KP, gm > 0, THETA >= 0,
n >= 1) by drawing again, never by clipping one parameter of a correlated pair.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np

from benchlab.design.mirror import solve_mirror_batch
from benchlab.design.parts import Part, PartArrays

_PERTURBED = ("vth", "kp", "theta", "n", "gm")
_MODEL_PARAMS = {"linear": ("vth", "gm"), "square": ("vth", "kp"), "theta": ("vth", "kp", "theta"),
                 "ekv": ("vth", "kp", "theta", "n")}


def _spread(values: np.ndarray) -> dict[str, float]:
    lo, hi = np.percentile(values, [2.5, 97.5])
    return {"mean": float(np.mean(values)), "std": float(np.std(values, ddof=1)) if values.size > 1 else 0.0,
            "p2_5": float(lo), "p97_5": float(hi), "min": float(np.min(values)), "max": float(np.max(values))}


@dataclass(frozen=True)
class MonteCarloResult:
    """Spread of the sink's currents: ``i_ref`` and, per output, ``i_out`` and ``error`` (vs the reference)."""

    samples: int
    seed: int
    resistor_tolerance: float
    i_ref: dict
    outputs: tuple[dict, ...]
    worst_error_p97_5: float

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form (SI units)."""
        return {"samples": self.samples, "seed": self.seed, "resistor_tolerance": self.resistor_tolerance,
                "i_ref": dict(self.i_ref), "outputs": [dict(o) for o in self.outputs],
                "worst_error_p97_5": self.worst_error_p97_5}


def covariance_of(part: Part) -> tuple[tuple[str, ...], np.ndarray]:
    """The names and covariance matrix of ``part``'s fitted parameters (from ``stderr`` and its
    ``corr_<a>_<b>`` entries; unknown errors count as 0, unknown correlations as 0)."""
    names = tuple(n for n in _PERTURBED if n in _MODEL_PARAMS[part.params.model])
    sd = np.array([float(part.stderr.get(n, 0.0) or 0.0) for n in names])
    sd = np.where(np.isfinite(sd) & (sd > 0), sd, 0.0)
    corr = np.eye(len(names))
    for a in range(len(names)):
        for b in range(a + 1, len(names)):
            value = part.stderr.get(f"corr_{names[a]}_{names[b]}", part.stderr.get(f"corr_{names[b]}_{names[a]}"))
            if isinstance(value, (int, float)) and np.isfinite(value):
                corr[a, b] = corr[b, a] = float(np.clip(value, -1.0, 1.0))
    return names, corr * np.outer(sd, sd)


_REDRAW_ROUNDS = 50


def _valid_draws(fields: dict, model: str) -> np.ndarray:
    """Which draws lie inside the parameters' valid ranges (KP or gm > 0, THETA >= 0, n >= 1)."""
    ok = np.ones(fields["vth"].shape, dtype=bool)
    if model == "linear":
        ok &= fields["gm"] > 0
    else:
        ok &= fields["kp"] > 0
    if model in ("theta", "ekv"):
        ok &= fields["theta"] >= 0
    if model == "ekv":
        ok &= fields["n"] >= 1.0
    return ok


def perturbed_arrays(part: Part, samples: int, rng: np.random.Generator) -> PartArrays:
    """``samples`` copies of ``part``'s curve, its parameters drawn from N(value, covariance).

    The law is truncated to the parameters' valid ranges by drawing again: a draw with a negative KP
    (possible when THETA and KP are poorly determined but strongly correlated) is replaced by a new
    joint draw, so the pair keeps its correlation and the curve stays near the measured points.
    Clipping a single parameter instead would break the pair apart and give currents the data rule out
    (a mirror output of 0 A). Draws still invalid after ``_REDRAW_ROUNDS`` rounds are clipped.
    """
    base = PartArrays.from_params([part.params]).take(np.zeros(samples, dtype=int))
    fields = {name: getattr(base, name).copy() for name in _PERTURBED}
    names, covariance = covariance_of(part)
    used = part.params.model
    if names and np.any(np.diag(covariance) > 0):
        centre = {name: fields[name].copy() for name in names}
        redo = np.ones(samples, dtype=bool)
        for _ in range(_REDRAW_ROUNDS):
            count = int(redo.sum())
            if count == 0:
                break
            # eigh tolerates a covariance that rounding left a hair short of positive definite
            draws = rng.multivariate_normal(np.zeros(len(names)), covariance, size=count, method="eigh")
            for k, name in enumerate(names):
                fields[name][redo] = centre[name][redo] + draws[:, k]
            redo = ~_valid_draws(fields, used)
    fields["kp"] = np.maximum(fields["kp"], 1e-12) if used != "linear" else fields["kp"]
    fields["gm"] = np.maximum(fields["gm"], 1e-12) if used == "linear" else fields["gm"]
    fields["theta"] = np.maximum(fields["theta"], 0.0)
    fields["n"] = np.maximum(fields["n"], 1.0) if used == "ekv" else fields["n"]
    return PartArrays(code=base.code, ut=base.ut, **fields)


def monte_carlo_currents(supply_v: float, resistor_ohm: float, ref: Part, outputs: Sequence[Part], *,
                         samples: int, seed: int, resistor_tolerance: float,
                         source_resistor_ohm: float = 0.0) -> tuple[np.ndarray, list[np.ndarray]]:
    """The drawn samples behind :func:`run_monte_carlo` (same arguments, same seed, same numbers).

    Returns
    -------
    i_ref : ndarray
        The reference current of each draw (A).
    i_outs : list of ndarray
        Each output's current of each draw (A).
    """
    rng = np.random.default_rng(seed)
    resistors = resistor_ohm * (1.0 + resistor_tolerance * rng.uniform(-1.0, 1.0, samples))
    source = None
    if source_resistor_ohm > 0:
        source = source_resistor_ohm * (1.0 + resistor_tolerance * rng.uniform(-1.0, 1.0, (samples, 1 + len(outputs))))
    ref_arrays = perturbed_arrays(ref, samples, rng)
    out_arrays = [perturbed_arrays(p, samples, rng) for p in outputs]
    _, i_ref, i_outs = solve_mirror_batch(supply_v, resistors, ref_arrays, out_arrays, source)
    return i_ref, list(i_outs)


def run_monte_carlo(supply_v: float, resistor_ohm: float, ref: Part, outputs: Sequence[Part], *,
                    samples: int, seed: int, resistor_tolerance: float,
                    source_resistor_ohm: float = 0.0) -> MonteCarloResult:
    """Spread of the reference and output currents.

    Parameters
    ----------
    supply_v, resistor_ohm : float
        The design's supply and chosen resistor.
    ref, outputs : Part
        The design's parts (``stderr`` gives each parameter's standard deviation).
    samples : int
        Number of draws (>= 2).
    seed : int
        Seed of ``numpy.random.default_rng``: the same seed gives the same numbers.
    resistor_tolerance : float
        Relative half-width of the resistors' tolerance band (0.05 for 5 %).
    source_resistor_ohm : float
        Nominal degeneration resistor (each drawn independently with the same tolerance).

    Returns
    -------
    MonteCarloResult
    """
    if samples < 2:
        raise ValueError("the Monte Carlo needs at least 2 samples")
    i_ref, i_outs = monte_carlo_currents(supply_v, resistor_ohm, ref, outputs, samples=samples, seed=seed,
                                         resistor_tolerance=resistor_tolerance,
                                         source_resistor_ohm=source_resistor_ohm)
    per_output = []
    worst = 0.0
    for part, i_out in zip(outputs, i_outs):
        error = i_out / i_ref - 1.0
        per_output.append({"part": part.name, "i_out": _spread(i_out), "error": _spread(error)})
        worst = max(worst, float(np.percentile(np.abs(error), 97.5)))
    return MonteCarloResult(samples=samples, seed=seed, resistor_tolerance=resistor_tolerance,
                            i_ref=_spread(i_ref), outputs=tuple(per_output), worst_error_p97_5=worst)
