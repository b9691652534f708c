"""Bundled alignment recipes (TOML files in this folder), installed as ``aligner_recipes``;
see ``aligner.recipes`` for the format."""
