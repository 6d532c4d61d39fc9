"""Design work on measured parts (pure functions on plain data).

- ``eseries``: IEC 60063 preferred values and the nearest one on a log scale.
- ``parts``: :class:`~benchlab.design.parts.Part` and a vectorised evaluator of many curves.
- ``mirror``: exact operating point of a resistor-fed reference and its outputs.
- ``sink``: current-sink synthesis and analysis (:func:`~benchlab.design.sink.synthesize_sink`,
  :func:`~benchlab.design.sink.analyze_sink`), with ``montecarlo`` and ``cautions``.
- ``matching``: matched pairs (exact greedy) and sets (heuristic), VGS binning.
- ``spice``: ``.model`` cards and sink netlists for ngspice.
- ``text``: readable reports.
"""
