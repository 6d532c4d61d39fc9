"""Bad input gets one clear InputError naming the file and row; non-ok points are never fitted."""

from __future__ import annotations

import numpy as np
import pytest

from benchlab.errors import FitError, InputError
from benchlab.extract import fit_sweep, load_sweep_csv
from benchlab.models import DeviceParams

PART = DeviceParams("theta", vth=3.0, kp=2.0, theta=0.2)


def _good_rows(count=20):
    currents = np.geomspace(1e-4, 0.1, count)
    return [(float(v), float(i)) for v, i in zip(PART.vgs_at(currents), currents)]


def _write(path, header, rows):
    lines = [header] + [",".join(str(x) for x in row) for row in rows]
    path.write_text("\n".join(lines) + "\n")
    return path


def _error(path) -> InputError:
    with pytest.raises(InputError) as info:
        load_sweep_csv(path)
    return info.value


def test_good_file_loads_and_extra_columns_are_ignored(tmp_path):
    rows = [(v, i, "x", 7) for v, i in _good_rows()]
    sweep = load_sweep_csv(_write(tmp_path / "ok.csv", "vgs,id,comment,channel", rows))
    assert sweep.vgs.size == 20 and np.all(np.diff(sweep.vgs) > 0)


def test_units_in_brackets_accepted_when_si(tmp_path):
    sweep = load_sweep_csv(_write(tmp_path / "u.csv", "VGS (V),ID [A]", _good_rows()))
    assert sweep.id.max() == pytest.approx(0.1)


def test_empty_file(tmp_path):
    path = tmp_path / "empty.csv"
    path.write_text("")
    err = _error(path)
    assert "empty" in str(err) and str(path) in str(err)


def test_header_only(tmp_path):
    assert "no data rows" in str(_error(_write(tmp_path / "h.csv", "vgs,id", [])))


def test_missing_column_names_what_was_found(tmp_path):
    err = _error(_write(tmp_path / "cols.csv", "voltage,current", _good_rows()))
    assert "vgs" in str(err) and "voltage, current" in str(err)


def test_column_in_milliamps_refused(tmp_path):
    err = _error(_write(tmp_path / "ma.csv", "vgs,id (mA)", _good_rows()))
    assert "SI units" in str(err)


def test_values_that_look_like_milliamps(tmp_path):
    rows = [(v, i * 1000) for v, i in _good_rows()]
    err = _error(_write(tmp_path / "ma.csv", "vgs,id", rows))
    assert "looks like mA" in str(err) and err.row is not None


def test_values_that_look_like_millivolts(tmp_path):
    rows = [(v * 1000, i) for v, i in _good_rows()]
    assert "looks like mV" in str(_error(_write(tmp_path / "mv.csv", "vgs,id", rows)))


@pytest.mark.parametrize("bad, words", [("nan", "not a finite"), ("-1e-6", "zero or negative"),
                                        ("0", "zero or negative"), ("abc", "not a number")])
def test_bad_current_named_by_row(tmp_path, bad, words):
    rows = [list(r) for r in _good_rows()]
    rows[6][1] = bad
    err = _error(_write(tmp_path / "bad.csv", "vgs,id", rows))
    assert words in str(err)
    assert err.row == 7 and f"bad.csv, row 7" in str(err)


def test_p_channel_signs_get_a_hint(tmp_path):
    rows = [(-v, -i) for v, i in _good_rows()]
    err = _error(_write(tmp_path / "pmos.csv", "vgs,id", rows))
    assert "P-channel" in str(err) and "|ID|" in str(err) and err.row == 1


def test_row_number_counts_blank_lines(tmp_path):
    # a blank line in the middle is skipped, but the row named is still the one a reader counts
    rows = [",".join(str(x) for x in r) for r in _good_rows()]
    rows[9] = rows[9].split(",")[0] + ",oops"
    (tmp_path / "gap.csv").write_text("vgs,id\n" + "\n".join(rows[:4]) + "\n\n" + "\n".join(rows[4:]) + "\n")
    err = _error(tmp_path / "gap.csv")
    assert err.row == 11  # 10th data row, after one blank line: line 12 of the file
    assert (tmp_path / "gap.csv").read_text().splitlines()[err.row].endswith("oops")


def test_unsorted_rows(tmp_path):
    rows = _good_rows()
    rows[5], rows[12] = rows[12], rows[5]
    rows += rows[:0]
    err = _error(_write(tmp_path / "shuffled.csv", "vgs,id", rows))
    assert "unsorted" in str(err) and err.row is not None


def test_duplicate_row(tmp_path):
    rows = _good_rows()
    rows.insert(4, rows[3])
    err = _error(_write(tmp_path / "dup.csv", "vgs,id", rows))
    assert "duplicate" in str(err) and err.row == 5


def test_up_then_down_pass_is_accepted_and_split(tmp_path):
    rows = _good_rows()
    sweep = load_sweep_csv(_write(tmp_path / "updown.csv", "vgs,id", rows + rows[::-1][1:]))
    assert sweep.has_both_directions
    assert (sweep.direction == "down").sum() == 19


def test_noise_jitter_in_vgs_is_not_disorder(tmp_path):
    # where the part is steep, VGS readings may step back by meter noise while the current still rises
    rows = _good_rows()
    rows[15] = (rows[14][0] - 1e-5, rows[15][1])
    sweep = load_sweep_csv(_write(tmp_path / "jitter.csv", "vgs,id", rows))
    assert sweep.vgs.size == 20


def test_status_other_than_ok_is_never_fitted(tmp_path):
    rows = [(v, i, "ok") for v, i in _good_rows()]
    rows[10] = (rows[10][0], 5.0, "compliance")  # a wild value that would wreck the fit
    rows.append(("inf", "nan", "over_range"))
    rows.append((rows[-2][0] + 0.1, 0.2, "unsettled"))
    sweep = load_sweep_csv(_write(tmp_path / "status.csv", "vgs,id,status", rows))
    assert sweep.vgs.size == 19
    assert sweep.skipped == {"compliance": 1, "over_range": 1, "unsettled": 1}
    result = fit_sweep(sweep, model="theta")
    assert result.vth == pytest.approx(3.0, abs=1e-6)
    assert result.points_skipped == 3


def test_session_record_search_points_below_detection_are_left_out(tmp_path):
    rows = [(0.5, -2e-9, "ok"), (1.5, 1e-9, "ok")] + [(v, i, "ok") for v, i in _good_rows()]
    path = _write(tmp_path / "Q01.csv", "vgs,id,status", rows)
    # a plain file: the noise floor is estimated from the negative reading (5 x 2 nA), and the same
    # two rows are left out as with the session's detection current
    plain = load_sweep_csv(path)
    assert plain.skipped == {"noise_floor": 2} and plain.vgs.size == 20
    sweep = load_sweep_csv(path, detect_current=2e-6)
    assert sweep.skipped == {"not_conducting": 2} and sweep.vgs.size == 20


def test_missing_file(tmp_path):
    assert "no such file" in str(_error(tmp_path / "nothere.csv"))


def test_array_input_errors_and_too_few_points():
    with pytest.raises(InputError):
        fit_sweep([], [])
    with pytest.raises(InputError):
        fit_sweep([3.0, 3.1], [1e-3])
    with pytest.raises(InputError):
        fit_sweep([3.0, 3.1, 3.2], [1e-3, float("nan"), 3e-3])
    with pytest.raises(FitError):
        fit_sweep([3.1, 3.2, 3.3], [1e-3, 2e-3, 4e-3], model="ekv")
    with pytest.raises(InputError):
        fit_sweep([3.1, 3.2, 3.3, 3.4], [1e-3, 2e-3, 4e-3, 6e-3], model="cubic")
    with pytest.raises(InputError):
        fit_sweep([3.1, 3.2, 3.3, 3.4], [1e-3, 2e-3, 4e-3, 6e-3], window=(1e-2, 1e-3))
