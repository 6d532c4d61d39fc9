"""Export to JSON / CSV and import back."""

from __future__ import annotations

import csv
import io
import json

import pytest

from benchlab.errors import LibraryError
from benchlab.library import Library, export_library, import_library, import_session
from benchlab.library.exchange import CSV_COLUMNS, csv_rows
from benchlab.models import DeviceParams
from session_builder import demo_bag, write_session


def _strip_volatile(data):
    data = json.loads(json.dumps(data))
    data.pop("exported")
    for part in data["parts"]:
        for sweep in part["sweeps"]:
            sweep.pop("key")
        for fit in part["fits"]:
            fit.pop("sweep")
    return data


@pytest.fixture
def filled(lib, tmp_path):
    session = write_session(tmp_path, "s1", "demo-bag", demo_bag(6, duds=(4,)))
    import_session(lib, session, refit=False)
    lib.add_part("H1", lot="hand", params=DeviceParams("linear", vth=3.9, gm=0.544), package="TO-220",
                 notes='a "quoted", comma note')
    design_id = lib.record_design({"kind": "sink", "supply": 12.0, "cautions": ["hot parts"]},
                                  [lib.get_part("Q01"), lib.get_part("Q02")])
    lib.record_binning({"current": 0.01}, {"A": ["Q03"], "B": ["Q06"]})
    return lib, design_id


def test_json_round_trip_is_lossless(filled, tmp_path, new_library_target):
    lib, design_id = filled
    exported = export_library(lib)
    text = json.dumps(exported, allow_nan=False)  # RFC 8259 JSON: no NaN / Infinity tokens
    with Library.open(new_library_target()) as copy:
        counts = import_library(copy, json.loads(text))
        assert counts["parts"] == 7 and counts["designs"] == 1 and counts["binnings"] == 1
        assert _strip_volatile(export_library(copy)) == _strip_volatile(exported)
        assert copy.get_part("Q01").state == "reserved"
        assert copy.design(1)["cautions"] == ["hot parts"]
        assert copy.get_part("Q01").params == lib.get_part("Q01").params
        assert copy.sweeps("Q02")[0]["vgs"] == lib.sweeps("Q02")[0]["vgs"]


def test_filtered_export_and_conflicting_import_writes_nothing(filled, tmp_path):
    lib, _ = filled
    rejected = export_library(lib, state="rejected")
    assert [p["label"] for p in rejected["parts"]] == ["Q05"] and rejected["designs"] == []
    one_lot = export_library(lib, lot="hand")
    assert [p["label"] for p in one_lot["parts"]] == ["H1"]
    with pytest.raises(LibraryError, match="no lot named 'nope'"):
        export_library(lib, lot="nope")
    before = lib.info()
    with pytest.raises(LibraryError, match="'hand/H1' already exists"):
        import_library(lib, one_lot)
    assert lib.info() == before
    with pytest.raises(LibraryError, match="not a benchlab library export"):
        import_library(lib, {"parts": []})
    one_lot["parts"][0].update(lot="elsewhere", state="misplaced")  # not a part state: the CHECK refuses it
    with pytest.raises(LibraryError, match="(?i)refused the change, nothing was written.*check"):
        import_library(lib, one_lot)
    assert lib.info() == before
    # a fit with a missing number was imported, and then every listing of the library was a traceback
    one_lot["parts"][0].update(lot="elsewhere", state="in_stock")
    one_lot["parts"][0]["fits"][0]["params"]["vth"] = None
    with pytest.raises(LibraryError, match="vth is None, not a finite number"):
        import_library(lib, one_lot)
    assert lib.info() == before
    lib.parts(state=None)  # still readable


def test_csv_export_reads_back_with_the_csv_module(filled):
    lib, _ = filled
    rows = csv_rows(lib, state=None)
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=list(CSV_COLUMNS))
    writer.writeheader()
    writer.writerows(rows)
    # RFC 4180 CSV as read by Python's csv module: quotes and commas inside fields survive
    back = list(csv.DictReader(io.StringIO(buffer.getvalue())))
    assert len(back) == 7
    hand = next(r for r in back if r["label"] == "H1")
    assert hand["notes"] == 'a "quoted", comma note' and hand["model"] == "linear"
    assert float(hand["vth"]) == 3.9 and float(hand["gm"]) == 0.544
    q01 = next(r for r in back if r["label"] == "Q01")
    assert float(q01["kp"]) == lib.get_part("Q01").params.kp and q01["state"] == "reserved"
    assert float(q01["stderr_vth"]) == 1e-3
