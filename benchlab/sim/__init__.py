"""The simulated bench: three SCPI instruments over TCP around a physical model of a MOSFET.

Public API (other parts and tests code against it)::

    from benchlab.sim import SimBench, SimConfig
    with SimBench(SimConfig(fixture="resistor", time_scale=0.0)) as bench:
        bench.start(first_port=0)
        bench.resources      # {"supply": "TCPIP0::127.0.0.1::<port>::SOCKET", "meter": ..., "smu": ...}
        bench.log            # commands received and output-state changes

Command set: ``docs/scpi.md``; defaults, faults and physics: ``docs/sim.md``.
"""

import json

from benchlab.sim.bench import DEFAULT_FIRST_PORT, DEFAULT_SERIES_RESISTOR_OHM, ROLES, SimBench, SimConfig
from benchlab.sim.faults import FaultSpec, parse_fault
from benchlab.sim.log import BenchLog, LogEntry
from benchlab.sim.physics import PartPhysics
from benchlab.sim.scpi import unquote_string


def parse_truth_reply(reply: str) -> dict:
    """Decode the reply of ``SIMulation:PART:TRUTh?`` (a quoted JSON string) into a dict."""
    return json.loads(unquote_string(reply))


__all__ = [
    "BenchLog", "DEFAULT_FIRST_PORT", "DEFAULT_SERIES_RESISTOR_OHM", "FaultSpec", "LogEntry", "PartPhysics",
    "ROLES", "SimBench", "SimConfig", "parse_fault", "parse_truth_reply",
]
