"""The desk's widgets, one per module."""
