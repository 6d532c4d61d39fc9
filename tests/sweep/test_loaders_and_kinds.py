"""Part loaders as one interface, the simulator's part role, and the enums of a sweep on disk."""

from __future__ import annotations

import csv
import json

from benchlab.instruments.sim_parts import SimPartHandler
from benchlab.kinds import Fixture, PartClass, PointStatus, SweepMode
from benchlab.services.characterize import PartLoader, PromptPartLoader, SimPartLoader, source_instrument, sweep_bag
from benchlab.sweep.session import read_sweep

from .simhelp import EXPECTED_CLASS, only_session, plan_for, sim_bench


class ListLoader:
    """A loader that is neither the prompt nor the simulator (as the terminal UI's is)."""

    def __init__(self, labels):
        self.labels = list(labels)
        self.notes: list[str] = []

    def next(self):
        return self.labels.pop(0) if self.labels else None

    def progress(self, text: str) -> None:
        self.notes.append(text)


def test_every_loader_implements_the_interface():
    assert isinstance(ListLoader([]), PartLoader)
    assert isinstance(PromptPartLoader(ask=lambda p: "q", say=lambda t: None), PartLoader)


def test_any_loader_hears_of_skipped_parts_and_progress(tmp_path):
    with sim_bench() as (sim, handle):
        plan = plan_for(handle, points=6)
        first = sweep_bag(handle, plan, sessions_root=tmp_path, lot="lot", count=1, loader=ListLoader(["A1"]))
        loader = ListLoader(["A1", "A2"])
        result = sweep_bag(handle, plan, count=2, loader=loader, resume=first.session_path)
    assert result.skipped == ("A1",) and [o.label for o in result.outcomes] == ["A2"]
    assert loader.notes[0] == "A1 is already measured in this session: skipped"
    assert loader.notes[-1] == "2 of 2 parts done"


def test_sim_part_handler_reads_labels_and_truth_and_the_loader_uses_it(tmp_path):
    with sim_bench(bag_size=3) as (sim, handle):
        parts = SimPartHandler(source_instrument(handle.bench))
        assert parts.index() == 0 and parts.label() == "Q01"
        truth = parts.truth()
        assert truth["label"] == "Q01" and truth["for_tests_only"] is True
        loader = SimPartLoader(handle.bench)
        assert [loader.next() for _ in range(4)] == ["Q01", "Q02", "Q03", None]
        assert parts.index() == -1


def test_enums_write_the_same_strings_to_disk(tmp_path):
    # the values on disk are the documented ones (docs/session-format.md): status 'ok', classification 'good'
    assert json.dumps([PartClass.GOOD, PointStatus.OK, Fixture.SMU, SweepMode.TARGETS]) == \
        '["good", "ok", "smu", "targets"]'
    assert not PartClass.INTERRUPTED.is_dud and not PartClass.GOOD.is_dud and PartClass.LEAKY.is_dud
    assert PartClass.parse("interrupted") is PartClass.INTERRUPTED and PartClass.parse("bogus") is None
    with sim_bench() as (sim, handle):
        result = sweep_bag(handle, plan_for(handle, points=6), sessions_root=tmp_path, lot="lot", count=1)
    folder = only_session(tmp_path)
    sidecar = json.loads((folder / "Q01.json").read_text())
    assert sidecar["classification"] == EXPECTED_CLASS[sim.bag[0].kind] == result.outcomes[0].classification
    with open(folder / "Q01.csv", newline="") as handle_:
        statuses = {row["status"] for row in csv.DictReader(handle_)}
    assert statuses <= {s.value for s in PointStatus} and "ok" in statuses
    assert set(read_sweep(folder / "Q01.json").status) <= set(PointStatus)
