"""Thin services layer between the CLI/TUI and the core packages (sweep, extract, library, design)."""
