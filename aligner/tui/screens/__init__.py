"""The desk's screens, one per module."""
