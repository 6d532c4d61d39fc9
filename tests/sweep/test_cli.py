"""The sweep, bag and demo commands: one clear error for bad input (nothing written or powered), summaries."""

from __future__ import annotations

import builtins

import pytest

from benchlab.cli import main
from benchlab.sim.bench import SimBench, SimConfig
from benchlab.sweep.session import read_session

from .simhelp import only_session, write_bench_file


@pytest.fixture
def sim():
    bench = SimBench(SimConfig(time_scale=0.0, bag_size=6, seed=3))
    bench.start(first_port=0)
    yield bench
    bench.stop()


def one_error_line(capsys) -> str:
    text = capsys.readouterr().err
    err = [line for line in text.strip().splitlines() if not line.startswith("session: ")]  # where it went
    assert len(err) == 1 and err[0].startswith("benchlab: error: ") and "Traceback" not in text, err
    return err[0]


def test_bad_bench_file_one_error_nothing_written(tmp_path, capsys):
    bad = tmp_path / "bench.toml"
    bad.write_text('format_version = 1\nfixture = "resistor"\n[limits]\nmax_supply_v = "12 V"\n')
    code = main(["sweep", "--part", "Q01", "--bench", str(bad), "--sessions", str(tmp_path / "s")])
    assert code == 2
    assert "bench.toml" in one_error_line(capsys)
    assert not (tmp_path / "s").exists()


def test_bad_limits_in_bench_file_refused_before_connecting(tmp_path, capsys, sim):
    path = write_bench_file(tmp_path / "bench.toml", sim.resources, 47.0, max_drain="-0.5 A")
    assert main(["sweep", "--part", "Q01", "--bench", str(path), "--sessions", str(tmp_path / "s")]) == 2
    assert "max_drain_a" in one_error_line(capsys)
    assert sim.log.commands("supply") == []  # not even connected
    assert not (tmp_path / "s").exists()


@pytest.mark.parametrize("options,needle", [(["--max-current", "0.9"], "max_drain_a"),
                                            (["--pulsed", "2"], "duty"),
                                            (["--mode", "currents"], "source-measure unit"),
                                            (["--voltages", "1,2,40"], "max_supply_v"),
                                            (["--points", "1"], "points")])
def test_bad_sweep_options_one_error_nothing_powered(tmp_path, capsys, sim, options, needle):
    path = write_bench_file(tmp_path / "bench.toml", sim.resources, 47.0)
    code = main(["sweep", "--part", "Q01", "--bench", str(path), "--sessions", str(tmp_path / "s"), *options])
    assert code == 2
    assert needle in one_error_line(capsys)
    assert not sim.log.output_was_ever_on("supply")
    assert not any(c.upper().startswith("VOLT") for c in sim.log.commands("supply"))
    assert not (tmp_path / "s").exists()


@pytest.mark.parametrize("command", [["sweep", "--part", "Q01"], ["bag", "--count", "2"]])
@pytest.mark.parametrize("wrong_role,code_text", [("meter", "-113"), ("supply", "-113")])
def test_wrong_instrument_on_a_resource_one_error_nothing_written_or_powered(tmp_path, capsys, sim, command,
                                                                             wrong_role, code_text):
    # both roles pointed at one instrument: the other role's settings are refused by it (-113, undefined
    # header: IEEE 488.2 / SCPI-1999 error table) before any record is written or any output enabled
    resources = dict(sim.resources)
    other = "supply" if wrong_role == "meter" else "meter"
    resources[wrong_role] = resources[other]
    path = write_bench_file(tmp_path / "bench.toml", resources, 47.0)
    assert main([*command, "--bench", str(path), "--sessions", str(tmp_path / "s")]) == 2
    err = capsys.readouterr().err
    errors = [line for line in err.splitlines() if line.startswith("benchlab: error: ")]
    assert len(errors) == 1 and "Traceback" not in err and "Caution" in err  # a real bench: cautions shown
    assert code_text in errors[0] and resources[other] in errors[0]
    assert not sim.log.output_was_ever_on("supply")
    assert not (tmp_path / "s").exists()


def test_unknown_option_value_is_refused_by_the_parser(tmp_path):
    with pytest.raises(SystemExit) as exc:
        main(["sweep", "--part", "Q01", "--sim", "--mode", "sideways", "--sessions", str(tmp_path / "s")])
    assert exc.value.code == 2 and not (tmp_path / "s").exists()


def test_unknown_part_on_the_simulator_writes_nothing(tmp_path, capsys):
    code = main(["sweep", "--part", "Q99", "--sim", "--sessions", str(tmp_path / "s")])
    assert code == 2 and "Q99" in one_error_line(capsys)
    assert not (tmp_path / "s").exists()


def test_operator_defaults_to_the_login_name(tmp_path, capsys, monkeypatch):
    # Python's getpass.getuser() takes the login name from LOGNAME first (Python library docs)
    monkeypatch.setenv("LOGNAME", "ana-at-the-bench")
    assert main(["sweep", "--part", "Q02", "--sim", "--sessions", str(tmp_path), "--points", "6"]) == 0
    assert read_session(only_session(tmp_path)).meta["operator"] == "ana-at-the-bench"


def test_sweep_command_prints_a_summary_line(tmp_path, capsys):
    assert main(["sweep", "--part", "Q02", "--sim", "--sessions", str(tmp_path), "--points", "10", "--lot", "L7",
                 "--operator", "kim", "--ambient", "24.5", "--down-sweep", "--start-v", "1.5", "--nplc", "2"]) == 0
    out = capsys.readouterr().out
    assert "Q02: good" in out and "at 250 uA" in out
    session = read_session(only_session(tmp_path))
    assert session.meta["operator"] == "kim" and session.meta["ambient_c"] == 24.5 and session.meta["lot"] == "L7"
    sweep = session.sweeps["Q02"]
    assert {"up", "down"} == set(sweep.direction) and sweep.meta["plan"]["nplc"] == 2.0
    assert sweep.vgs[0] == pytest.approx(1.5, abs=0.01)  # started at --start-v


def test_simulator_faults_from_the_command_line(tmp_path, capsys):
    code = main(["sweep", "--part", "Q01", "--sim", "--sessions", str(tmp_path / "s"),
                 "--sim-fault", "garble@meter=40", "--sim-fault", "garble@meter=41"])
    # one garbled reply is asked again; two in a row stop the sweep with one line
    assert code == 2 and "unexpected" in one_error_line(capsys)
    sweep = read_session(only_session(tmp_path / "s")).sweeps["Q01"]
    assert sweep.complete is False and len(sweep.vgs) == sweep.meta["points"]
    code = main(["sweep", "--part", "Q01", "--sim", "--sessions", str(tmp_path / "t"), "--sim-fault", "melt=3"])
    assert code == 2 and "unknown kind" in one_error_line(capsys) and not (tmp_path / "t").exists()


def test_bag_on_a_real_bench_prompts_for_each_part(tmp_path, capsys, sim, monkeypatch):
    answers = iter(["A-1", "A-1", "", "q"])
    prompts = []

    def fake_input(prompt):
        prompts.append(prompt)
        return next(answers)

    monkeypatch.setattr(builtins, "input", fake_input)
    # the simulator stands in for real instruments: on it (it identifies as BENCHLAB-SIM) bag would load the parts
    # itself, so it is taken here for what a real bench is
    from benchlab.services import characterize

    monkeypatch.setattr(characterize, "is_simulated", lambda handle: handle.simulator is not None)
    path = write_bench_file(tmp_path / "bench.toml", sim.resources, sim.series_resistor_actual_ohm)
    code = main(["bag", "--lot", "bench-bag", "--count", "5", "--bench", str(path), "--sessions", str(tmp_path / "s"),
                 "--points", "8"])
    captured = capsys.readouterr()
    assert code == 0 and len(prompts) == 4 and "q to stop" in prompts[0]
    assert "A-1 is already measured in this session: skipped" in captured.out
    assert "Caution" in captured.err  # the usual cautions before powering a real fixture
    session = read_session(only_session(tmp_path / "s"))
    assert session.meta["parts"] == ["A-1", "Q02"]  # Enter takes the suggested label
    assert "2 parts swept" in captured.out and sim.log.last_output_state("supply") is False


def test_demo_bag_sweep_has_a_dud_and_complete_sessions(tmp_path):
    # the sweeping step of `benchlab demo` (the whole demo is tested in tests/test_demo.py)
    from benchlab.services.characterize import DEMO_STORY, run_demo

    assert "invented" in DEMO_STORY
    result = run_demo(tmp_path, count=12)
    session = read_session(only_session(tmp_path))
    assert len(session.sweeps) == 12 and all(s.complete for s in session.sweeps.values())
    classes = {s.meta["classification"] for s in session.sweeps.values()}
    assert "good" in classes and classes - {"good"}  # at least one dud to set aside
    assert [o.label for o in result.outcomes] == sorted(session.sweeps)


@pytest.mark.parametrize("options,needle", [(["--count", "0"], "--count"), ([], "--count N"),
                                            (["--resume", "nowhere"], "session.json"),
                                            (["--count", "3", "--lot", "a/b"], "lot name"),
                                            (["--sim-fixture", "smu", "--count", "1", "--sessions", "s"], "--sim"),
                                            (["--resume", "s/x", "--lot", "b"], "--lot is kept from the session")])
def test_bad_bag_options_one_error_nothing_written(tmp_path, capsys, options, needle, monkeypatch):
    monkeypatch.chdir(tmp_path)
    where = [] if "--resume" in options or "--sessions" in options else ["--sessions", str(tmp_path / "s")]
    bench = ["--bench", "bench.toml"] if "--sim-fixture" in options else ["--sim"]  # simulator option, real bench
    try:
        code = main(["bag", *bench, *where, *options])
    except SystemExit as stop:  # a usage error (refused by the option's type) is one line too
        code = stop.code
    assert code == 2 and needle in one_error_line(capsys)
    assert not (tmp_path / "s").exists()


def test_progress_warns_when_the_output_could_not_be_confirmed_off():
    import io

    from benchlab.commands.sweep import ProgressBar
    from benchlab.sweep.records import SweepFault

    out = io.StringIO()
    bar = ProgressBar(stream=io.StringIO(), out=out)
    bar(SweepFault("Q01", "no reply", "InstrumentTimeout", 1.0))
    bar(SweepFault("Q02", "no reply", "InstrumentTimeout", 1.0, ("switching the supply output off failed: x",)))
    first, second = out.getvalue().splitlines()
    assert first.endswith("output switched off")
    assert "WARNING: could not confirm the output is off" in second and "output switched off" not in second
