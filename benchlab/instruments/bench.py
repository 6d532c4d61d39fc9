"""Connecting a whole bench: one transport and role object per instrument of the fixture.

``open_bench(config)`` opens every instrument the fixture needs, identifies each (``*IDN?``),
clears its status (``*CLS``) and resets it when asked. Nothing is switched on here: a
resource that does not answer gives one clear error while every output is still untouched.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable

from benchlab.errors import BenchlabError, InstrumentError
from benchlab.instruments.config import BenchConfig, InstrumentSpec
from benchlab.instruments.profiles import Profile, load_profile
from benchlab.instruments.scpi_roles import ScpiInstrument, ScpiMeter, ScpiSmu, ScpiSupply
from benchlab.instruments.transport import Transport, VisaTransport

ROLE_CLASSES: dict[str, type[ScpiInstrument]] = {
    "supply": ScpiSupply,
    "meter": ScpiMeter,
    "smu": ScpiSmu,
}


def make_resource_manager(visa_library: str = "@py") -> Any:
    """A pyvisa resource manager (``"@py"``: the pure-Python backend; else a VISA library path)."""
    import pyvisa  # imported here: only opening a bench needs it

    try:
        return pyvisa.ResourceManager(visa_library)
    except (OSError, ValueError) as exc:
        raise InstrumentError(f"cannot load VISA library '{visa_library}': {exc}") from exc


@dataclass
class Bench:
    """An open bench: the role objects of its fixture (``None`` for roles it does not use).

    Closing sends nothing; call :meth:`safe_off` first on every exit path of a sweep.
    """

    config: BenchConfig
    supply: ScpiSupply | None = None
    meter: ScpiMeter | None = None
    smu: ScpiSmu | None = None
    identities: dict[str, str] = field(default_factory=dict)
    profiles: dict[str, Profile] = field(default_factory=dict)

    def instruments(self) -> dict[str, ScpiInstrument]:
        """Role -> connected instrument."""
        found = {"supply": self.supply, "meter": self.meter, "smu": self.smu}
        return {role: inst for role, inst in found.items() if inst is not None}

    def safe_off(self) -> list[BenchlabError]:
        """Switch every output off, trying each instrument even if one fails; returns the failures."""
        failures: list[BenchlabError] = []
        for instrument in (self.smu, self.supply):
            if instrument is not None:
                try:
                    instrument.safe_off()
                except BenchlabError as exc:
                    failures.append(exc)
        return failures

    def close(self) -> None:
        """Close every connection (outputs are left as they are)."""
        for instrument in self.instruments().values():
            instrument.close()

    def __enter__(self) -> "Bench":
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.close()


TransportFactory = Callable[[InstrumentSpec, Profile], Transport]


def open_bench(config: BenchConfig, resource_manager: Any = None, *,
               transport_factory: TransportFactory | None = None) -> Bench:
    """Connect every instrument the fixture needs and identify it.

    Parameters
    ----------
    config : BenchConfig
        A validated bench.
    resource_manager : pyvisa.ResourceManager, optional
        Injected manager; by default one is made for ``config.visa_library``.
    transport_factory : callable, optional
        ``(spec, profile) -> Transport``; replaces pyvisa entirely (tests, other links).

    Returns
    -------
    Bench
        Use as a context manager; closing sends nothing.

    Raises
    ------
    InstrumentError
        Naming the role and resource that could not be opened or did not answer; every
        connection opened so far is closed again and no output has been touched.
    """
    if transport_factory is None:
        # Not closed with the bench: pyvisa shares one manager session between all instances, so
        # closing it would also close every other open resource in the process.
        manager = resource_manager if resource_manager is not None else make_resource_manager(config.visa_library)

        def transport_factory(spec: InstrumentSpec, profile: Profile) -> Transport:
            return VisaTransport(manager, spec.resource, timeout_ms=spec.timeout_ms,
                                 options=profile.connection).open()

    bench = Bench(config=config)
    try:
        for role in config.roles():
            spec = config.instruments[role]
            profile = load_profile(spec.profile)
            try:
                transport = transport_factory(spec, profile)
            except InstrumentError as exc:
                raise type(exc)(f"{role} did not answer: {_strip_resource(exc, spec)}", resource=spec.resource) from exc
            instrument = ROLE_CLASSES[role](transport, profile)
            setattr(bench, role, instrument)
            try:
                bench.identities[role] = instrument.connect(reset=spec.reset_on_connect)
            except InstrumentError as exc:
                if hasattr(exc, "code"):
                    raise
                raise type(exc)(f"{role} did not answer: {_strip_resource(exc, spec)}", resource=spec.resource) from exc
            bench.profiles[role] = profile
    except BaseException:
        bench.close()
        raise
    return bench


def _strip_resource(exc: InstrumentError, spec: InstrumentSpec) -> str:
    text = str(exc)
    prefix = f"{spec.resource}: "
    return text[len(prefix):] if text.startswith(prefix) else text
