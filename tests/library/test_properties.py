"""Property tests: any printable label, lot and note survives the library and its JSON exchange."""

from __future__ import annotations

import json

import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from benchlab.errors import LibraryError
from benchlab.library import Library, export_library, import_library
from benchlab.models import DeviceParams

names = st.text(st.characters(blacklist_categories=("Cc", "Cs")), min_size=1, max_size=24).filter(
    lambda s: s.strip() == s and s != "")


@settings(max_examples=25, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(label=names, lot=names, notes=st.text(max_size=40).filter(lambda s: "\x00" not in s),
       vth=st.floats(0.3, 6.0), kp=st.floats(0.01, 20.0))
@example(label="Q10", lot="\u00b9", notes="", vth=1.0, kp=1.0)  # a superscript digit once broke label sorting
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


def test_two_readings_of_one_slashed_name_are_reported_as_ambiguous(lib):
    lib.add_part("b/c", lot="a")
    lib.add_part("c", lot="a/b")
    with pytest.raises(LibraryError, match=r"ambiguous: lot 'a' label 'b/c', lot 'a/b' label 'c'"):
        lib.get_part("a/b/c")
