"""One sweep reader (benchlab.sweepfile): the fit command, the library import, the library refit and the session
reader choose the same points from the same record, whatever a crash left at its end."""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pytest

from benchlab.errors import InputError
from benchlab.extract import load_sweep_csv
from benchlab.library.sessions import read_session as library_read_session
from benchlab.models import DeviceParams
from benchlab.sweep.session import read_sweep
from benchlab.sweepfile import CSV_COLUMNS, read_table

PARAMS = DeviceParams("square", vth=2.1, kp=0.8)  # an invented part (test data)


def _record(folder, *, cut: bool = True, detect: float = 2e-6):
    """A session record as the recorder writes it: 8 noise-floor readings (some negative), an over-range
    reading, 40 conducting points with a stated VGS spread, and (``cut``) a last line cut mid-write."""
    rng = np.random.default_rng(3)
    folder.mkdir()
    rows = []
    floor = rng.normal(0.0, 2e-8, 8)
    for k, i in enumerate(floor):
        rows.append((k, 1.0 + 0.1 * k, float(i), "ok", "up", 0.0))
    rows.append((8, float("inf"), float("nan"), "over_range", "up", 0.0))
    currents = np.geomspace(1e-5, 0.2, 40)
    vgs = PARAMS.vgs_at(currents)
    for k, (v, i) in enumerate(zip(vgs, currents), start=9):
        rows.append((k, float(v) + rng.normal(0, 2e-4), float(i), "ok", "up", float(rng.normal(0, 3e-4))))
    lines = [",".join(CSV_COLUMNS)]
    for p, v, i, s, d, sv in rows:
        lines.append(f"{p},{0.01 * p:.6f},{v!r},{i!r},{v + 1.0!r},{i!r},{s},{d},{sv!r}")
    text = "\n".join(lines) + "\n"
    if cut:
        text += "49,0.490000,2.9"  # the point in flight when the process died
    (folder / "Q01.csv").write_text(text)
    sidecar = {"format": "benchlab-sweep/1", "label": "Q01", "lot": "bag", "complete": False, "ended": None,
               "classification": None, "plan": {"detect_current_a": detect}, "fits": []}
    (folder / "Q01.json").write_text(json.dumps(sidecar))
    (folder / "session.json").write_text(json.dumps({"format": "benchlab-session/1", "id": folder.name, "lot": "bag",
                                                     "parts": ["Q01"], "ambient_c": 27.0}))
    return folder / "Q01.csv"


def test_every_way_in_chooses_the_same_points(tmp_path):
    path = _record(tmp_path / "s")
    table = read_table(path)
    assert table.truncated and len(table) == 49  # the cut line skipped, every whole line kept
    by_fit = load_sweep_csv(path, detect_current=2e-6)
    by_session = read_sweep(path).fit_points()
    (library_sweep,) = library_read_session(tmp_path / "s").sweeps
    by_library = library_sweep.fit_points()
    for points in (by_session, by_library):
        assert np.array_equal(points.vgs, by_fit.vgs) and np.array_equal(points.id, by_fit.id)
        assert points.skipped == by_fit.skipped == {"not_conducting": 8, "over_range": 1}
        assert points.sigma_v == by_session.sigma_v
    assert by_fit.vgs.size == 40
    # the stated VGS noise: RMS(spread_v) / sqrt 2 of the points read twice (docs/session-format.md)
    assert by_session.sigma_v == pytest.approx(3e-4 / np.sqrt(2), rel=0.3)


def test_a_copied_out_csv_drops_its_noise_floor_like_the_session(tmp_path):
    path = _record(tmp_path / "s", cut=False)
    plain = tmp_path / "copy.csv"
    plain.write_text(path.read_text())  # no sidecar: the floor comes from the negative readings
    copied, session = load_sweep_csv(plain), load_sweep_csv(path, detect_current=2e-6)
    assert np.array_equal(copied.vgs, session.vgs) and copied.skipped["noise_floor"] == 8


def test_only_a_record_loses_a_last_line_without_newline(tmp_path):
    path = tmp_path / "plain.csv"
    currents = np.geomspace(1e-4, 0.1, 12)
    path.write_text("vgs,id\n" + "\n".join(f"{v!r},{i!r}" for v, i in zip(PARAMS.vgs_at(currents).tolist(),
                                                                          currents.tolist())))
    assert len(read_table(path)) == 12 and not read_table(path).truncated  # anyone's CSV: an ordinary row


def test_a_cut_record_fits_through_the_command(tmp_path):
    # a crash mid-line used to end `benchlab fit` with "direction '' is not 'up' or 'down'"
    _record(tmp_path / "s")
    sidecar = tmp_path / "s" / "Q01.json"
    data = json.loads(sidecar.read_text())
    data.update(complete=True, classification="good")
    sidecar.write_text(json.dumps(data))
    done = subprocess.run([sys.executable, "-m", "benchlab", "fit", str(tmp_path / "s"), "--model", "square",
                           "--json"], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    fit = json.loads(done.stdout)
    # the square law the points were computed from (an invented part), within the 0.2 mV reading noise
    assert fit["vth"] == pytest.approx(PARAMS.vth, abs=2e-3) and fit["kp"] == pytest.approx(PARAMS.kp, rel=0.02)


def test_a_bad_row_is_one_error_naming_it(tmp_path):
    path = _record(tmp_path / "s", cut=False)
    lines = path.read_text().splitlines()
    lines[12] = lines[12].replace(",ok,", ",ok,,")  # a row with a field too many is fine; a short one is not
    lines[20] = "19,0.19,abc"
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError, match=r"Q01.csv, row 20: expected 9 fields, found 3"):
        read_table(path)


def test_fit_import_and_refit_weight_by_the_same_stated_vgs_noise(tmp_path):
    # the record states its VGS noise (spread_v); `benchlab fit`, the library import and the library refit all
    # read it through the one reader and fit with it, so the three quote the same errors (docs/extraction.md)
    from benchlab.services import library as library_service
    from benchlab.services.fitting import fit_files

    _record(tmp_path / "s", cut=False)
    sidecar = tmp_path / "s" / "Q01.json"
    data = json.loads(sidecar.read_text())
    data.update(complete=True, classification="good")
    sidecar.write_text(json.dumps(data))
    (fitted,) = fit_files([tmp_path / "s"], model="theta").records
    db = tmp_path / "lib.db"
    library_service.import_sessions(db, [str(tmp_path / "s")], model="theta")
    imported = library_service.list_parts(db)[0]
    library_service.refit(db, model="theta")
    refitted = library_service.list_parts(db)[0]
    for part in (imported, refitted):
        assert part.params.vth == pytest.approx(fitted.result.vth, abs=1e-12)
        assert part.stderr["vth"] == pytest.approx(fitted.result.stderr["vth"], rel=1e-9)
    stored = library_service.open_library(db)
    with stored as lib:
        (sweep,) = lib.sweeps(lib.parts(state=None)[0])
    assert sweep["direction"][-1] == "up" and sweep["spread_v"][-1] is not None


def test_rows_out_of_file_order_are_taken_in_point_order_and_line_endings_do_not_matter(tmp_path):
    path = _record(tmp_path / "s", cut=False)
    lines = path.read_text().splitlines()
    rng = np.random.default_rng(5)
    shuffled = tmp_path / "shuffled.csv"
    body = lines[1:]
    order = rng.permutation(len(body))
    # a spreadsheet's export: byte-order mark, CRLF line ends, rows sorted some other way
    shuffled.write_bytes(("\ufeff" + "\r\n".join([lines[0]] + [body[k] for k in order]) + "\r\n").encode("utf-8"))
    a, b = read_table(path).fit_points(2e-6), read_table(shuffled).fit_points(2e-6)
    assert np.array_equal(a.vgs, b.vgs) and np.array_equal(a.id, b.id) and a.sigma_v == b.sigma_v
    assert np.array_equal(b.rows, 1 + np.argsort(order)[9:])  # each point still names its own row in the file
    again = tmp_path / "again.csv"
    again.write_text("\n".join([lines[0]] + body + [body[12]]) + "\n")
    with pytest.raises(InputError, match=r"row 50: point number 12 appears twice"):
        read_table(again)


def _same_sweep(a, b):
    assert type(a) is type(b)
    if isinstance(a, InputError):
        assert str(a) == str(b)
        return
    for name in ("vgs", "id", "direction", "rows"):
        assert np.array_equal(getattr(a, name), getattr(b, name)), name
    assert (a.source, a.skipped, a.fold_backs, a.sigma_v) == (b.source, b.skipped, b.fold_backs, b.sigma_v)


def test_many_files_read_together_give_what_each_gives_alone(tmp_path):
    # the batched path (benchlab fit reads plain CSVs together) must change no point, row, direction or error
    from benchlab.extract.sweepdata import load_sweeps_csv

    currents = np.geomspace(1e-4, 0.1, 30).tolist()
    vgs = PARAMS.vgs_at(np.array(currents)).tolist()
    good = [f"{v!r},{i!r}" for v, i in zip(vgs, currents)]
    shapes = {
        "plain": "vgs,id\n" + "\n".join(good) + "\n",
        "plain2": "vgs,id\n" + "\n".join(good[:20]) + "\n",
        "units": "VGS (V),ID [A]\n" + "\n".join(good) + "\n",
        "extra": "time,vgs,id\n" + "\n".join(f"{k},{g}" for k, g in enumerate(good)) + "\n",
        "crlf": "vgs,id\r\n" + "\r\n".join(good) + "\r\n",
        "no_newline": "vgs,id\n" + "\n".join(good),
        "blank_line": "vgs,id\n" + "\n".join(good[:10]) + "\n\n" + "\n".join(good[10:]) + "\n",
        "quoted": '"vgs","id"\n' + "\n".join(good) + "\n",
        "noise_floor": "vgs,id\n1.0,-1e-9\n1.1,2e-9\n1.2,-2e-9\n" + "\n".join(good) + "\n",
        "up_down": "vgs,id\n" + "\n".join(good + good[::-1][1:]) + "\n",
        "unsorted": "vgs,id\n" + "\n".join(good[5:] + good[:5]) + "\n",
        "not_a_number": "vgs,id\n" + "\n".join(good[:5]) + "\nx,1e-3\n",
        "nan": "vgs,id\n" + "\n".join(good[:5]) + "\nnan,1e-3\n",
        "negative": "vgs,id\n" + "\n".join(good[:5]) + "\n3.9,-1e-3\n" + "\n".join(good[5:]) + "\n",
        "in_ma": "vgs,id\n" + "\n".join(f"{v!r},{1e3 * i!r}" for v, i in zip(vgs, currents)) + "\n",
        "short_row": "vgs,id\n" + "\n".join(good[:5]) + "\n3.9\n",
        "header_only": "vgs,id\n",
        "no_columns": "a,b\n1,2\n",
        "mv_units": "vgs (mV),id\n1,2\n",
    }
    paths = []
    for name, text in shapes.items():
        (tmp_path / f"{name}.csv").write_bytes(text.encode())
        paths.append(tmp_path / f"{name}.csv")
    paths.append(tmp_path / "missing.csv")
    paths.append(_record(tmp_path / "s", cut=True))
    detects = [None] * (len(paths) - 1) + [2e-6]
    together = load_sweeps_csv(paths + paths[:3], detects + detects[:3])
    for path, detect, batched in zip(paths + paths[:3], detects + detects[:3], together):
        try:
            alone = load_sweep_csv(path, detect_current=detect)
        except InputError as exc:
            alone = exc
        _same_sweep(batched, alone)
    kinds = {p.stem: type(s).__name__ for p, s in zip(paths, together)}
    assert kinds["plain"] == "Sweep" and kinds["not_a_number"] == kinds["missing"] == "InputError"  # both kinds met
