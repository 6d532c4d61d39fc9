"""Parts by hand, naming and ambiguity, states, designs and binnings."""

from __future__ import annotations

import pytest

from benchlab.errors import LibraryError
from benchlab.library import PartRecord, export_library
from benchlab.models import DeviceParams, solve_resistor_line

NASTY_LABELS = [
    "Q1'; DROP TABLE parts; --",
    'Q"2" OR 1=1',
    "Q3 %_ \\ ? :name @x $y",
    "Q4 ) ; SELECT * FROM lots",
    "Ω5 ünïcode",
]


@pytest.mark.parametrize("label", NASTY_LABELS)
def test_labels_outside_the_name_rule_are_refused_and_nothing_is_written(lib, label):
    # labels become file names, SPICE names and CSV/HTML text: the library holds them to the command line's rule
    with pytest.raises(LibraryError, match="bad part label"):
        lib.add_part(label, lot="bag", params=DeviceParams("square", vth=2.71, kp=0.93))
    with pytest.raises(LibraryError, match="bad lot name"):
        lib.add_part("Q1", lot=label)
    assert lib.info()["parts"] == 0 and lib.lots() == []


@pytest.mark.parametrize("notes", NASTY_LABELS)
def test_notes_with_sql_metacharacters_round_trip(lib, notes):
    params = DeviceParams("square", vth=2.71, kp=0.93)
    added = lib.add_part("Q1", lot="bag.1", params=params, notes=notes)
    assert lib.get_part("bag.1/Q1") == added and added.notes == notes
    assert lib.info()["parts"] == 1  # nothing dropped, nothing duplicated
    assert export_library(lib)["parts"][0]["notes"] == notes


def test_hand_entered_linear_part_matches_the_worked_example(lib):
    part = lib.add_part("Q07", lot="demo-bag", params=DeviceParams("linear", vth=3.9, gm=0.544))
    assert isinstance(part, PartRecord) and part.params.model == "linear" and part.fit_id is not None
    vgs, i_d = solve_resistor_line(part.params, 12.0, 1000.0)
    # common practice, no published source: 3.9 V / 0.544 A/V on 12 V through 1 kOhm settles at
    # VGS = 2133.6/545 = 3.91486 V and ID = 8.085 mA; the hand value 8.5 mA does not satisfy both lines.
    assert vgs == pytest.approx(2133.6 / 545, abs=1e-6)
    assert i_d == pytest.approx(8.085e-3, abs=1e-6)
    assert lib.fits("Q07")[0]["source"] == "hand"


def test_parts_without_curve_and_bad_input(lib):
    bare = lib.add_part("Q1", package="TO-220")
    assert bare.params is None and bare.package == "TO-220" and bare.lot == "default"
    with pytest.raises(LibraryError, match="already exists"):
        lib.add_part("Q1")
    with pytest.raises(LibraryError, match="polarity"):
        lib.add_part("Q2", polarity="X")
    with pytest.raises(LibraryError, match="bad part label"):
        lib.add_part("   ")
    with pytest.raises(LibraryError, match="finite"):
        lib.add_part("Q3", params=DeviceParams("square", float("nan"), kp=1.0))
    assert [p.label for p in lib.parts(state=None)] == ["Q1"]  # the failed adds wrote nothing


def test_ambiguous_and_unknown_names_say_so(lib):
    a = lib.add_part("Q01", lot="bag-A")
    b = lib.add_part("Q01", lot="bag-B")
    lib.add_part("Q02", lot="bag-B")
    with pytest.raises(LibraryError, match=r"ambiguous.*bag-A/Q01, bag-B/Q01.*LOT/LABEL"):
        lib.get_part("Q01")
    assert lib.get_part("bag-A/Q01") == a and lib.get_part("bag-B/Q01") == b
    assert lib.get_part("Q02").lot == "bag-B"
    with pytest.raises(LibraryError, match="no part 'Q99'"):
        lib.get_part("Q99")
    with pytest.raises(LibraryError, match="no part 'bag-C/Q01'"):
        lib.get_part("bag-C/Q01")


def test_slashes_in_lots_and_labels_are_refused(lib):
    # a '/' would make LOT/LABEL ambiguous and a label a path (session files are named by label)
    for label, lot in (("Q/7", "bag"), ("Q7", "2026/12"), ("..", "bag"), ("Q7", "..")):
        with pytest.raises(LibraryError, match="bad (part label|lot name)"):
            lib.add_part(label, lot=lot)
    assert lib.info()["parts"] == 0


def test_states_reasons_and_history(lib):
    lib.add_part("Q1", params=DeviceParams("square", vth=3.0, kp=1.0))
    with pytest.raises(LibraryError, match="needs a reason"):
        lib.set_state("Q1", "rejected")
    with pytest.raises(LibraryError, match="unknown part state"):
        lib.set_state("Q1", "lost")
    rejected = lib.set_state("Q1", "rejected", "gate-source leakage after the drop test")
    assert rejected.state == "rejected" and rejected.reason.startswith("gate-source")
    assert lib.parts() == [] and [p.label for p in lib.parts(state="rejected")] == ["Q1"]
    lib.set_state("Q1", "in_stock")
    assert [h["new_state"] for h in lib.history("Q1")] == ["rejected", "in_stock"]


def test_record_design_reserves_parts_and_refuses_unavailable_ones(lib):
    ref = lib.add_part("Q1", params=DeviceParams("square", vth=3.0, kp=1.0))
    out = lib.add_part("Q2", params=DeviceParams("square", vth=3.01, kp=1.0))
    spare = lib.add_part("Q3", params=DeviceParams("square", vth=3.02, kp=1.0))
    design = {"kind": "sink", "supply": 12.0, "r_chosen": 1000.0, "cautions": ["hot"]}
    design_id = lib.record_design(design, [ref, out])
    stored = lib.design(design_id)
    assert stored["supply"] == 12.0 and stored["cautions"] == ["hot"]
    assert [(p["label"], p["state"], p["position"]) for p in stored["recorded_parts"]] == [
        ("Q1", "reserved", 0), ("Q2", "reserved", 1)]
    assert [p.label for p in lib.parts()] == ["Q3"]
    with pytest.raises(LibraryError, match=rf"part Q2 was reserved by design {design_id} at \d\d:\d\d UTC"):
        lib.record_design(design, [spare, out], state="used")
    assert lib.get_part("Q3").state == "in_stock"  # all or nothing
    assert len(lib.designs()) == 1
    with pytest.raises(LibraryError, match="no design 42"):
        lib.design(42)


def test_binning_is_stored_with_members(lib):
    for k in range(4):
        lib.add_part(f"Q{k}", params=DeviceParams("square", vth=3.0 + 0.05 * k, kp=1.0))
    binning_id = lib.record_binning({"current": 0.01, "width": 0.1}, {"A": ["Q0", "Q1"], "B": ["Q2", "Q3"]})
    stored = lib.binning(binning_id)
    assert stored["scheme"]["width"] == 0.1
    assert stored["bins"] == {"A": ["default/Q0", "default/Q1"], "B": ["default/Q2", "default/Q3"]}


def test_a_stored_curve_with_a_null_number_is_one_clear_error(lib):
    # libraries written before NaN was refused hold such rows; reading them was a TypeError traceback
    part = lib.add_part("Q9", params=DeviceParams("square", 2.0, kp=0.5))
    with lib.write() as conn:
        conn.execute("UPDATE fits SET params_json = ? WHERE part_id = ?",
                     ('{"model": "square", "vth": 2.0, "kp": null}', part.id))
    with pytest.raises(LibraryError, match="default/Q9: its stored curve is unreadable"):
        lib.parts(state=None)
