"""One command language: walks the whole real parser and checks each rule of it on every command.

The rules (benchlab/commands/_args.py): quantities take one syntax everywhere (SI prefixes and unit
symbols after the BIPM SI Brochure, 9th ed., table 7) and negative values reach the option's own check;
errors name the option typed; ``--out`` is only where results go; one name per concept; simulator
settings are ``--sim-<name>`` with one meaning and default; an option given where it has no effect is
refused; ``--json`` on every command that prints a result (JSON Lines); ``--help`` loads nothing heavy.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
from pathlib import Path

import pytest

from benchlab import cli

REPO = Path(__file__).resolve().parents[1]
# commands whose output is the data itself (written where --out says, else to standard output), a server or
# the interactive terminal app
NO_JSON = {"sim", "export csv", "export json", "export spice", "ui"}
# one concept, one name: the spellings a user met before, each replaced by the name on the right
RETIRED = {"--current": "--at-current", "--current-max": "--at-current-max", "--size": "--outputs",
           "--temperature": "--ambient", "--fixture": "--sim-fixture", "--time-scale": "--sim-time-scale",
           "--log": "--sim-log", "--fault": "--sim-fault", "--bag-size": "--sim-bag-size",
           "--out-model": "--output-model", "--latency": "--sim-latency"}


def _walk(parser: argparse.ArgumentParser, path: tuple[str, ...] = ()):
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for name, sub in action.choices.items():
                yield from _walk(sub, path + (name,))
            return
    yield path, parser


LEAVES = list(_walk(cli.build_parser()))
OPTIONS = [(path, action) for path, leaf in LEAVES for action in leaf._actions if action.option_strings
           and not isinstance(action, argparse._HelpAction)]
QUANTITIES = [(path, a) for path, a in OPTIONS if hasattr(a.type, "unit")]


def _usage_error(capsys, argv) -> str:
    with pytest.raises(SystemExit) as stop:
        cli.main(argv)
    assert stop.value.code == 2
    err = capsys.readouterr().err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("benchlab: error: "), err  # one line, like every error
    return lines[0]


def test_the_walk_sees_every_command():
    assert len(LEAVES) >= 20 and len(QUANTITIES) >= 30


@pytest.mark.parametrize("path, action", OPTIONS, ids=lambda x: x if isinstance(x, str) else None)
def test_no_option_reads_a_bare_float_or_int(path, action):
    # a bare float() refuses '20m'; a bare int() takes -3 for a count: every value goes through the shared types
    assert action.type not in (float, int), f"{' '.join(path)} {action.option_strings[0]}"


@pytest.mark.parametrize("path, action", QUANTITIES, ids=[f"{' '.join(p)} {a.option_strings[0]}"
                                                          for p, a in QUANTITIES])
def test_every_quantity_takes_the_same_syntax(path, action):
    unit = action.type.unit

    def parse(text):
        return parse_one(action, text)

    if unit in ("%", "degC"):
        assert parse("20") == 20
        return
    # SI Brochure table 7: m = 1e-3; the unit symbol is optional and may be spaced
    expected = 0.02
    assert parse("0.02") == pytest.approx(expected)
    assert parse("20m") == pytest.approx(expected)
    if unit:
        assert parse(f"20m{unit}") == pytest.approx(expected)
        assert parse(f"20 m{unit}") == pytest.approx(expected)


@pytest.mark.parametrize("path, action", QUANTITIES, ids=[f"{' '.join(p)} {a.option_strings[0]}"
                                                          for p, a in QUANTITIES])
def test_a_bad_quantity_is_one_line_naming_the_option_typed(path, action, capsys):
    option = action.option_strings[0]
    line = _usage_error(capsys, [*path, option, *["abc"] * (action.nargs if isinstance(action.nargs, int) else 1)])
    assert f"argument {option}:" in line
    # a negative value reaches the option's own check (argparse alone would say "expected one argument")
    if action.type.sign != "any":
        line = _usage_error(capsys, [*path, option, *["-1e-5"] * (action.nargs if isinstance(action.nargs, int)
                                                                   else 1)])
        assert f"argument {option}: must be" in line and "expected one argument" not in line
    else:
        leaf = dict(LEAVES)[path]
        value = "-5" if action.type.unit == "degC" else "-5m"
        assert leaf._parse_optional(value) is None  # read as a value, not as an unknown option
        assert parse_one(action, value) == pytest.approx(-5.0 if action.type.unit == "degC" else -5e-3)


def parse_one(action, text):
    """The value of ``text`` for ``action``; a list option gets it repeated and gives back its first value."""
    count = getattr(action.type, "min_count", None)
    value = action.type(",".join([text] * count) if count else text)
    return value[0] if isinstance(value, tuple) else value


def test_negative_values_where_they_make_sense():
    parser = cli.build_parser()
    args = parser.parse_args(["design", "sink", "--supply", "24", "--at-current", "20m", "--vth-tempco", "-4.5m",
                              "--ref-model", "vth=2.9,kp=1.6"])
    assert args.vth_tempco == pytest.approx(-4.5e-3)
    assert parser.parse_args(["sweep", "--part", "Q01", "--sim", "--ambient", "-5"]).ambient == -5.0


def test_a_negative_threshold_is_refused_with_its_reason(capsys):
    line = _usage_error(capsys, ["parts", "add", "Q01", "--vth", "-2.9", "--kp", "1.6"])
    assert "argument --vth: must be above 0" in line and "magnitude" in line


def test_a_plan_error_names_the_options_typed(capsys, tmp_path):
    code = cli.main(["sweep", "--part", "Q01", "--sim", "--sessions", str(tmp_path), "--min-current", "50m",
                     "--max-current", "10m"])
    err = capsys.readouterr().err.strip()
    assert code == 2 and "--min-current" in err and "--max-current" in err and "_current_a" not in err
    assert list(tmp_path.iterdir()) == []


def test_a_design_error_names_the_options_typed(capsys, tmp_path):
    db = str(tmp_path / "lib.db")
    for label, vth in (("Q01", "2.9"), ("Q02", "2.95")):  # invented parts
        assert cli.main(["parts", "add", label, "--vth", vth, "--kp", "1.6", "--library", db]) == 0
    capsys.readouterr()
    assert cli.main(["design", "match", "--library", db, "--at-current", "20m", "--at-current-max", "5m",
                     "--outputs", "1"]) == 2
    err = capsys.readouterr().err
    assert "--at-current-max" in err and "(0.02 A)" in err


def test_out_is_only_where_results_are_written():
    outs = [(path, a) for path, a in OPTIONS if "--out" in a.option_strings]
    assert outs and all(a.metavar in ("FILE", "DIR") for _, a in outs)
    assert not [a for _, a in OPTIONS if any(o.startswith("--out-") for o in a.option_strings)]


def test_out_on_a_design_is_not_taken_for_another_option(capsys):
    # 'design sink --out sink.cir' once failed with "no part 'sink.cir'"; options are never abbreviated
    line = _usage_error(capsys, ["design", "sink", "--supply", "24", "--at-current", "20m", "--ref-model",
                                 "vth=2.9,kp=1.6", "--out", "sink.cir"])
    assert "unrecognized arguments: --out sink.cir" in line


def test_one_name_per_concept():
    used = {o for _, a in OPTIONS for o in a.option_strings}
    assert sorted(used & set(RETIRED)) == []
    assert set(RETIRED.values()) <= used
    # the same option means the same thing everywhere: one unit, and for simulator settings one default and help
    by_name: dict[str, list] = {}
    for _, action in OPTIONS:
        by_name.setdefault(action.option_strings[0], []).append(action)
    for name, actions in by_name.items():
        assert len({getattr(a.type, "unit", None) for a in actions}) == 1, name
        if name.startswith("--sim-"):
            assert len({(a.default, a.help) for a in actions}) == 1, name
    assert {"--sim-fixture", "--sim-seed", "--sim-time-scale", "--sim-fault", "--sim-log"} <= set(by_name)


@pytest.mark.parametrize("path, leaf", LEAVES, ids=[" ".join(p) for p, _ in LEAVES])
def test_json_on_every_command_that_prints_a_result(path, leaf):
    has = any("--json" in a.option_strings for a in leaf._actions)
    assert has == (" ".join(path) not in NO_JSON)
    if has:
        help_text = next(a.help for a in leaf._actions if "--json" in a.option_strings)
        assert "one object per line" in help_text


@pytest.mark.parametrize("argv, words", [
    (["bench", "check", "bench.toml", "--sim-fixture", "smu"], "--sim-fixture sets up the simulated bench"),
    (["sweep", "--part", "Q01", "--bench", "bench.toml", "--sim-seed", "3"], "--sim-seed sets up the simulated"),
    (["design", "sink", "--supply", "24", "--at-current", "20m", "--ref-model", "vth=2.9,kp=1.6", "--seed", "4"],
     "--seed seeds the Monte Carlo run"),
    (["bag", "--sim", "--resume", "sessions/x", "--ambient", "21"], "--ambient is kept from the session"),
    (["sweep", "--part", "Q01", "--sim", "--list"], "--list uploads a voltage list: it goes with mode 'voltages'"),
    (["sweep", "--part", "Q01", "--sim", "--mode", "currents", "--sim-fixture", "smu", "--start-v", "1"],
     "--start-v starts the adaptive search"),
    (["sweep", "--part", "Q01", "--sim", "--sim-fixture", "smu", "--current-from", "meter"],
     "--current-from only applies to the resistor fixture"),
])
def test_an_option_given_but_without_effect_is_an_error(argv, words, capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert cli.main(argv) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and words in err[0]
    assert list(tmp_path.iterdir()) == []  # nothing written


def test_json_lines_from_a_listing(capsys, tmp_path):
    db = str(tmp_path / "lib.db")
    for label, vth in (("Q01", "2.9"), ("Q02", "2.95")):  # invented parts
        assert cli.main(["parts", "add", label, "--lot", "rack", "--vth", vth, "--kp", "1.6", "--library", db]) == 0
    capsys.readouterr()
    for argv, lines in ((["parts", "list"], 2), (["library", "lots"], 1), (["library", "info"], 1),
                        (["parts", "show", "rack/Q01"], 1)):
        assert cli.main([*argv, "--library", db, "--json"]) == 0
        out = capsys.readouterr().out.splitlines()
        assert len(out) == lines and all(isinstance(json.loads(line), dict) for line in out)


def test_help_loads_nothing_heavy():
    # every --help (and the bare command list) must not import numpy, scipy, matplotlib, pyvisa or the simulator
    paths = [list(p) for p, _ in LEAVES] + [[]]
    script = f"""
import contextlib, io, json, sys
from benchlab.cli import main
for path in {json.dumps(paths)}:
    with contextlib.redirect_stdout(io.StringIO()):
        try:
            main([*path, "--help"])
        except SystemExit:
            pass
heavy = sorted(m for m in sys.modules if m.split(".")[0] in ("numpy", "scipy", "matplotlib", "pyvisa")
               or m.startswith("benchlab.sim"))
print(json.dumps(heavy))
"""
    run = subprocess.run([sys.executable, "-c", script], cwd=REPO, capture_output=True, text=True, timeout=120)
    assert run.returncode == 0, run.stderr
    assert json.loads(run.stdout.strip().splitlines()[-1]) == []


def test_every_option_the_docs_name_exists():
    # a renamed option must be renamed in README, DEVELOPERS.md and docs/ too (options of other programs excepted)
    import re

    others = {"--owner", "--pwprompt"}  # PostgreSQL's createuser/createdb, in docs/library.md
    known = {o for _, a in OPTIONS for o in a.option_strings} | {"--help", "--version"}
    # the benchmark scripts' own options (docs give the command that reproduces each figure)
    for script in sorted((REPO / "benchmarks").glob("*.py")):
        known |= set(re.findall(r"add_argument\(\s*[\"'](--[a-z0-9-]+)", script.read_text(encoding="utf-8")))
    stale = []
    for doc in [REPO / "README.md", REPO / "DEVELOPERS.md", *sorted((REPO / "docs").glob("*.md"))]:
        for option in set(re.findall(r"(?<![\w-])--[a-z][a-z0-9-]*[a-z0-9](?![\w*-])", doc.read_text(encoding="utf-8"))):
            if option not in known and option not in others:
                stale.append(f"{doc.name}: {option}")
    assert sorted(stale) == []
