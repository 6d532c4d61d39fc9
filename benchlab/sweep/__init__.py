"""Sweeping diode-connected parts safely.

- :mod:`benchlab.sweep.plan`: sweep plans (plain data) and their validation;
- :mod:`benchlab.sweep.safety`: the guard between the engine and the source instruments;
- :mod:`benchlab.sweep.stepping`: pure decisions (next adaptive setpoint, when to stop);
- :mod:`benchlab.sweep.engine`: ``run(plan, instruments, on_event, cancel) -> SweepOutcome``;
- :mod:`benchlab.sweep.classify`: good / open / shorted / leaky / unstable;
- :mod:`benchlab.sweep.records`: points, outcome and progress events;
- :mod:`benchlab.sweep.session`: session records on disk and their readers.
"""
