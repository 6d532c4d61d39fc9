"""benchlab: characterize discrete MOSFETs on a SCPI bench, fit them, match them, design current sinks."""

__version__ = "0.1.0"
