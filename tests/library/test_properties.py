"""Property tests: any label and lot within the name rule, and any note, survive the library and its JSON exchange;
any name outside the rule is refused."""

from __future__ import annotations

import json
import re

import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from benchlab.errors import LibraryError
from benchlab.library import Library, export_library, import_library
from benchlab.models import DeviceParams

# the command line's rule for labels and lot names (benchlab.names), which the library applies on every way in
names = st.from_regex(r"[A-Za-z0-9][A-Za-z0-9_.+-]{0,23}", fullmatch=True)


@settings(max_examples=25, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(label=names, lot=names, notes=st.text(max_size=40).filter(lambda s: "\x00" not in s),
       vth=st.floats(0.3, 6.0), kp=st.floats(0.01, 20.0))
@example(label="Q10", lot="9.b", notes="\u00b9", vth=1.0, kp=1.0)  # a superscript digit once broke label sorting
def test_any_text_round_trips_through_sql_and_json(new_library_target, label, lot, notes, vth, kp):
    # each example gets two new libraries on the test's backend
    with Library.open(new_library_target()) as lib:
        added = lib.add_part(label, lot=lot, notes=notes, params=DeviceParams("square", vth=vth, kp=kp))
        assert lib.get_part(f"{lot}/{label}") == added
        assert lib.get_part(label) == added
        data = json.loads(json.dumps(export_library(lib), allow_nan=False))
    with Library.open(new_library_target()) as copy:
        import_library(copy, data)
        back = copy.get_part(f"{lot}/{label}")
        assert (back.label, back.lot, back.notes, back.params) == (label, lot, notes, added.params)
        if copy.backend == "sqlite":
            # SQLite documentation (https://sqlite.org/pragma.html#pragma_integrity_check): "ok" when intact
            assert copy.connection.execute("PRAGMA integrity_check").fetchone()[0] == "ok"


def test_a_nul_character_in_free_text_is_refused_on_every_backend(lib):
    # PostgreSQL text cannot hold NUL (PostgreSQL documentation, "Character Types"); both backends refuse it alike
    with pytest.raises(LibraryError, match="NUL character"):
        lib.add_part("Q01", notes="a\x00b")
    assert lib.parts(state=None) == []


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(text=st.text(max_size=80).filter(lambda t: re.fullmatch(r"[A-Za-z0-9][A-Za-z0-9_.+-]{0,63}", t) is None))
@example(text="F\n")  # a '$' in the name check once let a trailing newline through
@example(text="../victim")
def test_any_name_outside_the_rule_is_refused(lib, text):
    with pytest.raises(LibraryError, match="bad (part label|lot name)"):
        lib.add_part(text, lot="bag")
    with pytest.raises(LibraryError, match="bad lot name"):
        lib.add_part("Q1", lot=text)
    assert lib.parts(state=None) == []


def test_two_readings_of_one_slashed_name_are_reported_as_ambiguous(lib):
    # names with '/' are refused now; a library written by an older benchlab may still hold them
    with lib.write() as db:
        for lot, label in (("a", "b/c"), ("a/b", "c")):
            lot_id = db.insert("INSERT INTO lots (name, description, created) VALUES (?, '', '2026-01-01')", (lot,))
            db.insert("INSERT INTO parts (lot_id, label, polarity, package, notes, state, created) "
                      "VALUES (?, ?, 'N', '', '', 'in_stock', '2026-01-01')", (lot_id, label))
    with pytest.raises(LibraryError, match=r"ambiguous: lot 'a' label 'b/c', lot 'a/b' label 'c'"):
        lib.get_part("a/b/c")
