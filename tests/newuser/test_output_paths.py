"""Every command with every option that names an output path, pointed where nothing can be written: a file in the
way, a folder nobody may write (/proc), a missing parent. Each gets one clear error (or, for a missing parent, the
folders are made) and never a traceback. The whole matrix runs in process (an exception escaping ``main`` is the
traceback a user would see); a few cases also run as the user would, in a subprocess."""

from __future__ import annotations

import sys
from pathlib import Path

import pytest
from newuser_cli import assert_one_clear_error, run

from benchlab.cli import main
from benchlab.library import Library
from benchlab.models import DeviceParams

UNWRITABLE = "/proc/benchlab-no-such-dir"  # procfs: no one, not even root, creates files there


@pytest.fixture(scope="module")
def lib_with_parts(tmp_path_factory):
    """A small invented library: three hand-entered parts of lot 'rack' and a saved sink design."""
    path = tmp_path_factory.mktemp("lib") / "lib.db"
    with Library.open(path, create=True) as lib:
        for k, vth in enumerate((3.90, 3.93, 3.88), start=1):
            lib.add_part(f"Q0{k}", lot="rack", params=DeviceParams("theta", vth=vth, kp=1.0, theta=0.1))
    assert main(["design", "sink", "--library", str(path), "--supply", "12", "--at-current", "0.02",
                 "--outputs", "2", "--load-voltage", "6", "--save"]) == 0
    return path


def _commands(db: Path, csv_file: Path):
    """(argv with {} where the path goes, whether the path is a folder)."""
    lib = ["--library", str(db)]
    return [
        (["demo", "--out", "{}"], True),
        (["sweep", "--sim", "--part", "Q01", "--sessions", "{}"], True),
        (["bag", "--sim", "--count", "1", "--sessions", "{}"], True),
        (["bag", "--sim", "--count", "1", "--sessions", "S", "--sim-log", "{}"], False),
        (["sweep", "--sim", "--part", "Q01", "--sessions", "S", "--sim-log", "{}"], False),
        (["thermal", "tempco", "--sim", "--part", "Q01", "--temps", "25,60", "--sessions", "{}", *lib], True),
        (["fit", str(csv_file), "--plot", "{}"], False),
        (["parts", "show", "Q01", "--plot", "{}", *lib], False),
        (["design", "sink", "--supply", "12", "--at-current", "0.02", "--outputs", "2", "--load-voltage", "6",
          "--spice", "{}", *lib], False),
        (["export", "csv", "--out", "{}", *lib], False),
        (["export", "json", "--out", "{}", *lib], False),
        (["export", "spice", "Q01", "--out", "{}", *lib], False),
        (["report", "--lot", "rack", "--out", "{}", *lib], True),
        (["report", "--lot", "rack", "--out", "R", "--pdf", "{}", *lib], False),
        (["parts", "add", "Q09", "--library", "{}"], False),
    ]


def _targets(tmp: Path) -> dict[str, str]:
    blocker = tmp / "a-file"
    blocker.write_text("in the way\n")
    return {"file-in-the-way": str(blocker / "sub" / "x.out"), "unwritable": UNWRITABLE + "/x.out",
            "missing-parent": str(tmp / "new" / "deeper" / "x.out")}


def test_every_output_path_option_is_one_clear_error_or_works(lib_with_parts, tmp_path, monkeypatch, capsys):
    csv_file = tmp_path / "q.csv"
    # textbook square law ID = KP/2 (VGS - VTO)^2, VTO 2.8 V, KP 1 A/V^2 (SPICE level 1)
    csv_file.write_text("vgs,id\n" + "".join(f"{v:.3f},{0.5 * (v - 2.8) ** 2!r}\n"
                                             for v in (3.0, 3.1, 3.2, 3.3, 3.4, 3.5, 3.6, 3.7, 3.8)))
    problems = []
    for case, (argv_template, is_dir) in enumerate(_commands(lib_with_parts, csv_file)):
        for kind, target in _targets(tmp_path / f"c{case}").items() if (tmp_path / f"c{case}").mkdir() is None else ():
            if kind == "missing-parent" and argv_template[0] in ("demo", "thermal"):
                continue  # would run the whole job; its folder creation is the same code as the other cases
            monkeypatch.chdir(tmp_path / f"c{case}")
            argv = [target if a == "{}" else a for a in argv_template]
            try:
                code = main(argv)
            except SystemExit as exc:  # argparse refusing the value: a usage line, not a traceback
                code = exc.code
            except BaseException as exc:  # noqa: BLE001 - this is the traceback a user would see
                problems.append(f"{' '.join(argv)} [{kind}]: {type(exc).__name__}: {exc}")
                continue
            err = capsys.readouterr().err
            if kind != "missing-parent" and code == 0:
                problems.append(f"{' '.join(argv)} [{kind}]: exit 0 although nothing could be written")
            if code != 0 and not err.strip():
                problems.append(f"{' '.join(argv)} [{kind}]: exit {code} with nothing said")
    assert not problems, "\n".join(problems)


@pytest.mark.parametrize("argv", [["report", "--lot", "rack", "--out", "{blocker}/sub"],
                                  ["report", "--lot", "rack", "--out", "/proc/x"],
                                  ["demo", "--out", "{blocker}/sub"],
                                  ["bag", "--sim", "--count", "1", "--sessions", "{blocker}/sub"]])
def test_output_folder_that_cannot_be_made_as_the_user_meets_it(lib_with_parts, tmp_path, argv):
    blocker = tmp_path / "a-file"
    blocker.write_text("x")
    argv = [a.format(blocker=blocker) for a in argv]
    result = run(*argv, "--library", lib_with_parts) if argv[0] == "report" else run(*argv, cwd=tmp_path)
    assert_one_clear_error(result)
    assert len(result.stderr.strip().splitlines()) <= 2, result.stderr
