"""The device library: lots, parts and their states, sweeps, fits, bins and designs.

Public API: :class:`Library` (``Library.open(path)``), :class:`PartRecord`, :class:`ImportSummary`,
:func:`default_library_path`, and the whole-library operations as free functions taking a library:
:func:`import_sessions` / :func:`import_session` (session records), :func:`export_library` /
:func:`import_library` (plain JSON). See docs/library.md.
"""

from benchlab.library.exchange import export_library, import_library
from benchlab.library.importer import import_session, import_sessions
from benchlab.library.records import PART_STATES, ImportedSweep, ImportSummary, PartRecord
from benchlab.library.store import LIBRARY_ENV, Library, default_library_path

__all__ = ["Library", "PartRecord", "ImportSummary", "ImportedSweep", "PART_STATES", "LIBRARY_ENV",
           "default_library_path", "import_sessions", "import_session", "export_library", "import_library"]
