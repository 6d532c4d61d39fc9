"""The whole main job on the simulated bench, end to end: sweep a bag, fit and store every part,
pick a matched set, design the current sink, export SPICE cards and write the report.

The scenario is invented for the demo (and says so): a workshop building an 8-channel
constant-current driver for LED strings on a plant-growing rack characterizes part of a bag of
N-channel power MOSFETs. Everything goes into one new run folder; nothing outside it is touched
(the user's own device library is never opened).
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Any, Callable

from benchlab.errors import DesignError, InputError
from benchlab.kinds import PartClass

DEMO_LOT = "demo-led-rack"
CHANNELS = 8  # LED strings on the invented rack: one reference part plus 8 outputs
CHANNEL_CURRENT_A = 0.020  # invented: 20 mA per LED string
REFERENCE_SUPPLY_V = 12.0  # invented: the driver's 12 V control rail feeds the reference branch
OUTPUT_VOLTAGE_V = 3.0  # invented: what the LED string leaves across each output part
MISMATCH_TARGET = 0.05  # invented: every string within 5 % of the reference current


@dataclass(frozen=True)
class DemoRun:
    """Where each product of the demo went, and the headline numbers."""

    folder: Path
    session: Path
    library: Path
    report: Path
    models: Path
    netlist: Path
    swept: int
    fitted: int
    rejected: int
    design_id: int | None
    design: dict[str, Any]

    def to_dict(self) -> dict[str, Any]:
        return {k: (str(v) if isinstance(v, Path) else v) for k, v in self.__dict__.items()}


def new_run_folder(root: str | Path) -> Path:
    """A fresh ``root/run-YYYYmmdd-HHMMSS[-k]`` folder, so re-running never overwrites an earlier run."""
    root = Path(root)
    if root.exists() and not root.is_dir():
        raise InputError("the demo output must be a folder", path=str(root))
    stamp = datetime.now().strftime("%Y%m%d-%H%M%S")
    for k in range(100):
        folder = root / (f"run-{stamp}" if k == 0 else f"run-{stamp}-{k}")
        try:
            folder.mkdir(parents=True)
            return folder
        except FileExistsError:
            continue
    raise InputError("could not make a new run folder", path=str(root))


def run_full_demo(out_root: str | Path, *, count: int = 12, seed: int = 1,
                  on_event: Callable[[Any], None] | None = None,
                  say: Callable[[str], None] = print) -> DemoRun:
    """Run the demo; ``say`` receives one line per step (the CLI prints them).

    Raises
    ------
    InputError
        On a bad count (checked before anything is started or written).
    """
    from benchlab.design.sink import SinkOptions
    from benchlab.design.text import format_sink_report
    from benchlab.services import characterize, design, library, report

    if not isinstance(count, int) or not CHANNELS + 1 <= count <= 40:
        raise InputError(f"the demo sweeps {CHANNELS + 1} to 40 parts (a reference and {CHANNELS} outputs must "
                         f"be found among them), got {count!r}")
    folder = new_run_folder(out_root)
    lib_path = folder / "library.db"

    say(f"1/5 sweeping {count} parts on the simulated bench ...")
    bag = characterize.run_demo(folder / "sessions", count=count, seed=seed, on_event=on_event)
    duds = [f"{o.label} {o.classification}" for o in bag.outcomes if o.classification != PartClass.GOOD]
    say(f"    {len(bag.outcomes)} swept, set aside: {', '.join(duds) or 'none'}")

    say("2/5 fitting every good sweep and storing the bag in a device library ...")
    summary = library.import_sessions(lib_path, [str(bag.session_path)], lot=DEMO_LOT)
    say(f"    {summary.fitted} fitted, {summary.rejected} rejected with their reasons")
    say(library.format_parts_table(library.list_parts(lib_path, lot=DEMO_LOT, state=None)))

    say(f"3/5 picking the best matched set of 1 + {CHANNELS} at {CHANNEL_CURRENT_A * 1e3:g} mA "
        f"and designing the sink ...")
    request = design.SinkRequest(
        supply=REFERENCE_SUPPLY_V, current=CHANNEL_CURRENT_A, outputs=CHANNELS, lot=DEMO_LOT, save=True,
        options=SinkOptions(series="E96", load_voltage=OUTPUT_VOLTAGE_V, monte_carlo=500, seed=seed,
                            mismatch_target=MISMATCH_TARGET))
    netlist = folder / "sink.cir"
    try:
        sink, design_id = design.design_sink(request, lib_path, spice_path=str(netlist))
    except DesignError as exc:
        raise DesignError(f"{exc}. The {summary.fitted} good parts of this run hold no set of 1 + {CHANNELS} "
                          f"that meets the demo's {MISMATCH_TARGET:.0%} target with {OUTPUT_VOLTAGE_V:g} V across "
                          f"each output; sweep more of the bag (--count 40). What was done so far is in {folder}"
                          ) from exc
    say(format_sink_report(sink, design_id))

    say("4/5 exporting SPICE model cards of the chosen parts ...")
    models = folder / "models.lib"
    specs = [f"{DEMO_LOT}/{name}" for name in [sink.to_dict()["ref"].split("/")[-1],
                                              *[o.part.split("/")[-1] for o in sink.outputs]]]
    library.write_output(library.export_spice_text(lib_path, specs), str(models))

    say("5/5 writing the report ...")
    files = report.write_report(lib_path, DEMO_LOT, str(folder / "report"), design_id)
    return DemoRun(folder=folder, session=Path(bag.session_path), library=lib_path, report=Path(files.index),
                   models=models, netlist=netlist, swept=len(bag.outcomes), fitted=summary.fitted,
                   rejected=summary.rejected, design_id=design_id, design=sink.to_dict())
