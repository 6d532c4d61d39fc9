"""The shortcuts of the fast fitting path give what the plain ways give.

Each check compares against something outside benchlab: scipy's bounded least squares, numpy's own
``nanmedian``, Python's universal-newline text reading.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy.optimize import least_squares

from benchlab.extract import load_sweep_csv
from benchlab.extract.engine import ekv_start_from_theta, initial_guess, model_current, row_median, solve_batch
from benchlab.models import DeviceParams


def _theta_law_sweeps(count, seed=4):
    # theta-law parts swept from well above threshold (100 uA to 100 mA): an ekv fit of such a sweep runs
    # along a curved valley with n on its bound, where the plain x10 / x0.1 damping took 77 iterations
    rng = np.random.default_rng(seed)
    currents = np.geomspace(1e-3, 0.1, 60)
    vgs, ids = [], []
    for _ in range(count):
        part = DeviceParams("theta", vth=rng.normal(3.0, 0.1), kp=rng.normal(1.2, 0.1), theta=0.1)
        vgs.append(part.vgs_at(currents) * (1 + rng.normal(0, 5e-4, currents.size)))
        ids.append(currents * (1 + rng.normal(0, 5e-4, currents.size)))
    return np.array(vgs), np.array(ids)


def test_ekv_fit_in_a_curved_valley_reaches_scipys_bounded_minimum():
    vgs, ids = _theta_law_sweeps(12)
    mask = np.ones_like(vgs)
    theta = solve_batch("theta", vgs, ids, mask, initial_guess("theta", vgs, ids, mask), with_covariance=False)
    start = ekv_start_from_theta(vgs, ids, mask, theta.params)
    fit = solve_batch("ekv", vgs, ids, mask, start, with_covariance=False)
    assert fit.converged.all()
    assert fit.iterations.max() < 60
    for row in range(vgs.shape[0]):
        # scipy's trust-region reflective solver on the same relative residuals and bounds (KP > 0,
        # THETA >= 0, n >= 1), from the same start, run to its tightest tolerances
        def residuals(p, row=row):
            return model_current("ekv", vgs[row][None], p[None])[0] / ids[row] - 1.0

        reference = least_squares(residuals, start[row], bounds=([-np.inf, 1e-15, 0.0, 1.0], np.inf),
                                  method="trf", x_scale="jac", ftol=1e-15, xtol=1e-15, gtol=1e-15, max_nfev=20000)
        scipy_rss = 2.0 * reference.cost
        # the batched solver's minimum is at least as low (to rounding) as scipy's
        assert fit.rss[row] <= scipy_rss * (1 + 1e-6)


def test_row_median_is_numpys_nanmedian():
    rng = np.random.default_rng(2)
    values = rng.normal(size=(300, 41))
    keep = rng.random(values.shape) < 0.4
    keep[:3] = False  # rows with nothing kept
    keep[3] = True
    values[5, 7] = np.nan  # a NaN among the kept entries is left out, as nanmedian does
    keep[5, 7] = True
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # numpy warns about the empty rows
        expected = np.nanmedian(np.where(keep, values, np.nan), axis=1)
    np.testing.assert_array_equal(row_median(values, keep), expected)


@pytest.mark.parametrize("newline", ["\n", "\r\n", "\r"])
@pytest.mark.parametrize("bom", [b"", b"\xef\xbb\xbf"])
def test_csv_line_endings_and_bom_read_as_text_mode_reads_them(tmp_path, newline, bom):
    # Python's universal newlines (io.TextIOWrapper, newline=None) read \n, \r\n and a lone \r as one line
    # end, and the utf-8-sig codec drops a byte-order mark: the reader must see the same rows
    rows = ["vgs,id", "2.90,1.0e-4", "3.00,1.0e-3", "", "3.10,4.0e-3", "3.20,9.0e-3", "3.30,1.6e-2"]
    path = tmp_path / "part.csv"
    path.write_bytes(bom + newline.join(rows).encode() + newline.encode())
    with open(path, encoding="utf-8-sig") as handle:
        assert handle.read().splitlines() == rows
    sweep = load_sweep_csv(path)
    np.testing.assert_array_equal(sweep.vgs, [2.90, 3.00, 3.10, 3.20, 3.30])
    np.testing.assert_array_equal(sweep.id, [1.0e-4, 1.0e-3, 4.0e-3, 9.0e-3, 1.6e-2])
    # the blank line is counted: the last three points are data rows 4 to 6 as a reader of the file sees them
    np.testing.assert_array_equal(sweep.rows, [1, 2, 4, 5, 6])
