"""Run a simulated bench in the foreground until SIGINT or SIGTERM (``benchlab sim``)."""

from __future__ import annotations

import signal
import sys
import threading
from typing import TextIO

from benchlab.sim.bench import SimBench, SimConfig


def serve_until_signalled(config: SimConfig, host: str, first_port: int, out: TextIO = sys.stdout,
                          stop_event: threading.Event | None = None) -> int:
    """Start the bench, print ``ROLE RESOURCE`` lines (flushed), serve until a signal, stop cleanly.

    Parameters
    ----------
    config : SimConfig
        The bench to run.
    host : str
        Listen address.
    first_port : int
        Supply port; the meter and SMU use the next two (0 = free ports).
    out : text stream
        Where the resource lines go.
    stop_event : threading.Event, optional
        Set it to stop (signals set it too); injected by tests.

    Returns
    -------
    int
        Exit code 0.
    """
    stop = stop_event or threading.Event()
    previous = {}
    if threading.current_thread() is threading.main_thread():
        for signum in (signal.SIGINT, signal.SIGTERM):
            previous[signum] = signal.signal(signum, lambda *_: stop.set())
    bench = SimBench(config)
    try:
        resources = bench.start(host=host, first_port=first_port)
        for role, resource in resources.items():
            print(f"{role} {resource}", file=out, flush=True)
        # a bench file pointing at this simulator needs the fixture resistor's actual (measured) value
        print(f"series_resistor {bench.series_resistor_actual_ohm:.6g} ohm (actual value: put it in the bench file's "
              f"[series_resistor] ohms)", file=out, flush=True)
        while not stop.wait(0.5):
            pass
    finally:
        bench.stop()
        for signum, handler in previous.items():
            signal.signal(signum, handler)
    return 0
