"""Bundled alignment recipes (TOML files in this folder); see aligner.recipes for the format."""
