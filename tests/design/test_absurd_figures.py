"""Absurd figures typed for design work (1e300 A, a threshold of 1e300 V, a hundred million Monte Carlo draws):
one clear error naming the option, no traceback, no numpy warning, nothing written. Each of these once overflowed,
hung or ended with a traceback (found by trying the tool as a user)."""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from benchlab.cli import main
from benchlab.library import Library
from benchlab.models import DeviceParams

# (arguments, the option or phrase the one error line must name); the library holds the invented demo bag below
CASES = [
    (["design", "match", "--at-current", "1e300", "--outputs", "2"], "--at-current"),  # overflowed, then hung
    (["design", "match", "--at-current", "300m", "--at-current-max", "1e300", "--outputs", "2"], "--at-current-max"),
    (["design", "match", "--at-current", "300m", "--outputs", "2", "--warm", "1e300"], "--warm"),  # traceback
    (["design", "sink", "--supply", "24", "--at-current", "1e300", "--outputs", "2"], "--at-current"),  # hung
    (["design", "sink", "--supply", "24", "--resistor", "1e300", "--outputs", "2"], "ohm"),  # traceback (brentq)
    (["design", "sink", "--supply", "24", "--at-current", "300m", "--outputs", "2", "--monte-carlo", "100000000"],
     "--monte-carlo"),  # ran out of memory instead of answering
    (["design", "sink", "--supply", "24", "--at-current", "300m", "--outputs", "2", "--tolerance", "2"],
     "--tolerance"),  # the error did not name the option
    (["design", "sink", "--supply", "24", "--at-current", "300m", "--outputs", "2", "--load-voltage", "1e300"],
     "--load-voltage"),
    (["design", "sink", "--supply", "24", "--at-current", "300m", "--ref-model", "vth=2.9,kp=1e300",
      "--output-model", "vth=2.9,kp=1"], "KP"),  # ZeroDivisionError
    (["design", "sink", "--supply", "24", "--at-current", "300m", "--ref-model", "vth=-2.9,kp=1",
      "--output-model", "vth=2.9,kp=1"], "threshold"),  # traceback (brentq)
    (["design", "bin", "--at-current", "300m", "--width", "1e300"], "--width"),  # printed a 300-digit bin edge
    (["design", "bin", "--at-current", "1e300", "--width", "10m"], "--at-current"),
    (["library", "set-current", "1e300"], "1000 A"),  # was taken; every stored gm became blank
    (["parts", "set-current", "Q01", "1e300"], "1000 A"),
    (["parts", "add", "X1", "--vth", "1e300", "--kp", "1"], "threshold"),  # was stored
    (["parts", "add", "X2", "--vth", "2", "--kp", "1e300"], "KP"),
    (["parts", "add", "X3", "--vth", "2", "--gm", "1e-300"], "gate drive"),
    (["parts", "add", "X4", "--vth", "2", "--kp", "1", "--theta", "1e300"], "gate drive"),
]


@pytest.fixture
def bag(tmp_path):
    """Six N-channel power MOSFETs of the invented demo bag, hand-entered (invented values)."""
    path = tmp_path / "lib.db"
    rng = np.random.default_rng(7)
    with Library.open(path) as lib:
        for i in range(6):
            lib.add_part(f"Q{i + 1:02d}", lot="grow-rack",
                         params=DeviceParams("theta", float(rng.normal(2.9, 0.05)), kp=float(rng.uniform(2.0, 2.6)),
                                             theta=0.15))
    return path


def _dump(path):
    with Library.open(path) as lib:
        return [(p.spec, p.state, p.params.to_dict() if p.params else None) for p in lib.parts(state=None)], \
            len(lib.designs())


@pytest.mark.parametrize("argv,named", CASES, ids=[" ".join(c[0]) for c in CASES])
def test_an_absurd_figure_is_one_clear_error_and_changes_nothing(bag, tmp_path, capsys, argv, named):
    before = _dump(bag)
    spice = tmp_path / "sink.cir"
    extra = ["--spice", str(spice)] if argv[:2] == ["design", "sink"] else []
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # an overflow on the way is a failure, not a warning line
        code = main([*argv, *extra, "--library", str(bag)])
    err = capsys.readouterr().err
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert code != 0
    assert len(lines) == 1 and lines[0].startswith("benchlab: error:"), err
    assert named in lines[0]
    assert _dump(bag) == before and not spice.exists()


def test_the_bounds_leave_real_parts_alone(bag, capsys):
    # a 1 + 2 sink at 300 mA on 24 V and a set matched 30 K warmer: ordinary work, still done
    assert main(["design", "sink", "--supply", "24", "--at-current", "300m", "--outputs", "2",
                 "--library", str(bag)]) == 0
    assert main(["design", "match", "--at-current", "300m", "--outputs", "2", "--warm", "30",
                 "--library", str(bag)]) == 0
    assert main(["parts", "add", "BIG", "--vth", "4", "--kp", "300", "--library", str(bag)]) == 0


def test_match_says_why_parts_are_left_over(bag, capsys):
    # six parts in sets of four: one set, two parts over. The text said 'no set left among them whose every output
    # conducts', as if the two parts were faulty, when two parts simply cannot make a set of four
    assert main(["design", "match", "--at-current", "20m", "--outputs", "3", "--library", str(bag)]) == 0
    out = capsys.readouterr().out
    assert "2 part(s) left over: too few for another set of 4" in out and "conducts" not in out
    assert main(["design", "match", "--at-current", "20m", "--outputs", "1", "--sets", "1", "--library",
                 str(bag)]) == 0
    assert "4 part(s) not used: the 1 set(s) asked for were found" in capsys.readouterr().out
