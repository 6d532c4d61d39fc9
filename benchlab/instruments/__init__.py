"""The instrument layer: the only part of benchlab that talks to pyvisa.

Modules (imported where needed; importing this package has no side effects):

* ``roles``: the three role interfaces the sweep engine codes against (Supply, Meter, SourceMeasureUnit);
* ``transport``: ``VisaTransport`` (pyvisa, one retry, one reopen) and the resource-kind table;
* ``scpi``: the SCPI-1999 error table and pure parsers of replies and templates;
* ``profiles``: TOML instrument profiles on a search path (``docs/profiles.md``);
* ``scpi_roles``: ``ScpiSupply``, ``ScpiMeter`` (and ``scpi_smu``: ``ScpiSmu``) over a transport and a profile;
* ``config``: bench files (``docs/bench-config.md``) and the built-in simulator bench;
* ``bench``: ``open_bench(config) -> Bench``, connecting and identifying every instrument.
"""
