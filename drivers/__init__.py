"""Bundled instrument profiles (TOML); installed as the benchlab.drivers package."""
