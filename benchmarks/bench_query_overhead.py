"""Per-query overhead of benchlab's instrument layer against a bare pyvisa query, same socket.

Starts the simulated bench in a child process (time scale 0; in this process its server threads
would compete with the client for the GIL and blur the figures), opens the supply through
``VisaTransport`` (which sets TCP_NODELAY on its socket), and times, interleaved in rounds so
machine noise hits all of them alike:

* bare:       ``resource.query("MEAS:VOLT?")`` on the pyvisa resource behind the transport;
* transport:  ``VisaTransport.query("MEAS:VOLT?")`` (retry/reconnect bookkeeping, lock);
* role:       ``ScpiSupply.measure_voltage()`` (profile lookup, template, reading parser);
* set+check:  ``ScpiSupply.set_voltage()`` (write + error-queue read) against a bare write + ``SYST:ERR?``;
* the same bare write + ``SYST:ERR?`` on a second, plain pyvisa-py connection (TCP_NODELAY off, the
  pyvisa-py default), which shows what setting TCP_NODELAY saves.

Prints microseconds per call and the ratio to the bare figure. Run:
``python benchmarks/bench_query_overhead.py [--rounds 20] [--per-round 100]``.
"""

from __future__ import annotations

import argparse
import multiprocessing
import socket
import statistics
import time


def _time_per_call(action, count: int) -> float:
    start = time.perf_counter()
    for _ in range(count):
        action()
    return (time.perf_counter() - start) / count


def _serve_simulator(resources_out, stop_in) -> None:
    from benchlab.sim import SimBench, SimConfig

    with SimBench(SimConfig(fixture="resistor", time_scale=0.0)) as sim:
        sim.start(first_port=0)
        resources_out.put(sim.resources)
        stop_in.get()


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=20)
    parser.add_argument("--per-round", type=int, default=100)
    args = parser.parse_args(argv)

    import pyvisa

    from benchlab.instruments.profiles import load_profile
    from benchlab.instruments.scpi_roles import ScpiSupply
    from benchlab.instruments.transport import VisaTransport, find_socket

    context = multiprocessing.get_context("spawn")
    resources_queue, stop_queue = context.Queue(), context.Queue()
    server = context.Process(target=_serve_simulator, args=(resources_queue, stop_queue), daemon=True)
    server.start()
    manager = pyvisa.ResourceManager("@py")
    try:
        resources = resources_queue.get(timeout=60)
        transport = VisaTransport(manager, resources["supply"], timeout_ms=2000).open()
        supply = ScpiSupply(transport, load_profile("generic-scpi-supply"))
        supply.connect()
        bare = transport._handle  # the very pyvisa resource (and socket) the layer uses
        sock = find_socket(bare)
        assert sock is not None and sock.getsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY)

        def bare_set_and_check() -> None:
            bare.write("VOLT 1.5")
            bare.query("SYST:ERR?")

        cases = {
            "bare query": lambda: bare.query("MEAS:VOLT?"),
            "transport query": lambda: transport.query("MEAS:VOLT?"),
            "role measure_voltage": supply.measure_voltage,
            "bare write + SYST:ERR?": bare_set_and_check,
            "role set_voltage": lambda: supply.set_voltage(1.5),
        }
        # A second, plain pyvisa-py connection (TCP_NODELAY off, its default) shows why the layer sets it:
        # the query written right after a write waits for the delayed ACK of the write.
        plain = manager.open_resource(resources["supply"], read_termination="\n", write_termination="\n",
                                      timeout=2000)

        def plain_set_and_check() -> None:
            plain.write("VOLT 1.5")
            plain.query("SYST:ERR?")

        for action in cases.values():  # warm up every path once
            _time_per_call(action, 20)
        samples: dict[str, list[float]] = {name: [] for name in cases}
        samples["no-NODELAY write + SYST:ERR?"] = []
        for _ in range(args.rounds):
            for name, action in cases.items():
                samples[name].append(_time_per_call(action, args.per_round))
            # each call stalls tens of ms: a few per round are enough
            samples["no-NODELAY write + SYST:ERR?"].append(_time_per_call(plain_set_and_check, 3))
        plain.close()
        transport.close()
    finally:
        stop_queue.put(True)
        server.join(timeout=10)
        manager.close()

    median = {name: statistics.median(values) for name, values in samples.items()}
    print(f"{'path':26s} {'us/call':>9s} {'ratio':>7s}   (median of {args.rounds} rounds x {args.per_round})")
    for name, seconds in median.items():
        base = (median["bare write + SYST:ERR?"] if name.startswith(("role set", "no-NODELAY"))
                else median["bare query"])
        if name.startswith("bare write"):
            base = median["bare query"]
        print(f"{name:26s} {seconds * 1e6:9.1f} {seconds / base:7.2f}")
    print(f"ratio transport/bare query: {median['transport query'] / median['bare query']:.3f}")
    print(f"ratio role/bare query:      {median['role measure_voltage'] / median['bare query']:.3f}")
    print(f"ratio role set_voltage/bare write+SYST:ERR?: "
          f"{median['role set_voltage'] / median['bare write + SYST:ERR?']:.3f}")
    print(f"ratio write+SYST:ERR? without/with TCP_NODELAY: "
          f"{median['no-NODELAY write + SYST:ERR?'] / median['bare write + SYST:ERR?']:.1f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
