"""End to end: sweep parts on the simulated bench (up and down), then fit the session records."""

from __future__ import annotations

import json

import pytest

from benchlab.cli import main
from benchlab.sim.bag import make_bag


def test_bag_on_simulated_bench_then_fit(tmp_path, capsys):
    sessions = tmp_path / "sessions"
    assert main(["bag", "--sim", "--count", "2", "--down-sweep", "--max-current", "0.3",
                 "--sessions", str(sessions)]) == 0
    capsys.readouterr()
    assert main(["fit", str(sessions), "--json", "--at-current", "0.1"]) == 0
    rows = [json.loads(line) for line in capsys.readouterr().out.strip().splitlines()]
    truth = {part.label: part for part in make_bag(seed=1, size=40)}  # the simulator's default bag
    assert [row["label"] for row in rows] == ["Q01", "Q02"]
    for row in rows:
        part = truth[row["label"]]
        assert row["model"] == "ekv", row["reason"]
        # the up pass is fitted: close to the part's reference threshold (it warms only a little)
        assert row["vth"] == pytest.approx(part.vth_ref, abs=0.01)
        assert row["n"] == pytest.approx(part.slope_n, rel=0.03)
        # 0.3 A at about 3 V heats the part: the down pass comes back at a lower VGS
        assert row["hysteresis_v"] < 0
        assert "self_heating_hysteresis" in row["flags"]
