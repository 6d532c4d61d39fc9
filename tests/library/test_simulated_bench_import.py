"""End to end: the simulated bench sweeps a bag, the library imports it, and its fits equal `benchlab fit`'s."""

from __future__ import annotations

import pytest

from benchlab.library import Library
from benchlab.services import library as library_service

from benchlab.services import characterize, fitting


@pytest.mark.slow
def test_demo_session_imports_with_the_same_fits_as_the_fit_command(tmp_path, library_target):
    result = characterize.run_demo(tmp_path / "sessions", count=5, seed=1)
    session = next((tmp_path / "sessions").iterdir())
    db = library_target
    summary = library_service.import_sessions(db, [str(session)])
    run = fitting.fit_files([str(session)])
    records = {r.source.label: r.result for r in getattr(run, "records", run)}
    with Library.open(db) as lib:
        parts = {p.label: p for p in lib.parts(state=None)}
        assert len(parts) == 5 and summary.fitted + summary.rejected == 5
        assert summary.rejected >= 1  # the seed-1 bag's first parts hold a dud
        for label, part in parts.items():
            sidecar_class = part.classification
            if sidecar_class != "good":
                assert part.state == "rejected" and part.reason.startswith(sidecar_class)
                continue
            # the library's re-fit reads the record with the same rules as the fit command
            theirs = records[label].params
            assert part.params.model == theirs.model and part.params.temperature_k == theirs.temperature_k
            for name in ("vth", "kp", "theta", "n"):  # a batch of one and a batch of many agree to rounding
                assert getattr(part.params, name) == pytest.approx(getattr(theirs, name), rel=1e-9, abs=1e-12)
            assert len(lib.sweeps(part)[0]["vgs"]) > 10
    assert result is not None
