"""The SQLite device library: lots, parts and their states, sweeps, fits, bins and designs.

Public API: :class:`Library` (``Library.open(path)``), :class:`PartRecord`, :class:`ImportSummary`,
:func:`default_library_path`. See docs/library.md.
"""

from benchlab.library.records import PART_STATES, ImportedSweep, ImportSummary, PartRecord
from benchlab.library.store import LIBRARY_ENV, Library, default_library_path

__all__ = ["Library", "PartRecord", "ImportSummary", "ImportedSweep", "PART_STATES", "LIBRARY_ENV",
           "default_library_path"]
