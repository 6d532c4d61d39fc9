"""``benchlab fit`` loads only what fitting needs: its start-up is part of every scripted re-fit (see
benchmarks/bench_fit_end_to_end.py, which times it as a separate process)."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np

from benchlab.models import DeviceParams

REPO = Path(__file__).resolve().parents[2]
# packages and parts of benchlab a fit never uses (the UI, the tables, plots, the library, instruments, the simulator)
NOT_NEEDED = ("textual", "pandas", "matplotlib", "schemdraw", "psycopg", "sqlalchemy", "scipy", "pyvisa")
NOT_NEEDED_HERE = ("benchlab.tui", "benchlab.library", "benchlab.report", "benchlab.design", "benchlab.instruments",
                   "benchlab.sim", "benchlab.sweep", "benchlab.api", "benchlab.services.library")


def test_fit_imports_nothing_it_does_not_use(tmp_path):
    part = DeviceParams("theta", vth=2.1, kp=0.8, theta=0.1)  # an invented part (test data)
    currents = np.geomspace(1e-4, 0.1, 40)
    rows = [f"{v!r},{i!r}" for v, i in zip(part.vgs_at(currents).tolist(), currents.tolist())]
    (tmp_path / "Q01.csv").write_text("vgs,id\n" + "\n".join(rows) + "\n")
    script = f"""
import contextlib, io, json, sys
from benchlab.cli import main
with contextlib.redirect_stdout(io.StringIO()) as out:
    code = main(["fit", "--json", {str(tmp_path / "Q01.csv")!r}])
print(json.dumps([code, json.loads(out.getvalue())["model"], sorted(sys.modules)]))
"""
    run = subprocess.run([sys.executable, "-c", script], cwd=REPO, capture_output=True, text=True, timeout=120)
    assert run.returncode == 0, run.stderr
    code, model, modules = json.loads(run.stdout.strip().splitlines()[-1])
    assert code == 0 and model in ("square", "theta", "ekv")  # it did fit
    loaded = [m for m in modules if m.split(".")[0] in NOT_NEEDED
              or any(m == part or m.startswith(part + ".") for part in NOT_NEEDED_HERE)]
    assert loaded == []
    # of the command modules only fit's own (the parser of the command named is the only one built)
    assert [m for m in modules if m.startswith("benchlab.commands.") and m != "benchlab.commands._args"] == \
        ["benchlab.commands.fit"]
