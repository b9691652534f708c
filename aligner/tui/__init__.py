"""The operator's desk: a Textual terminal UI for one bench (``aligner desk BENCH``).

Screens for the bench, the plan, sweeps, the alignment meter, the devices and the run log
(listed once, in :data:`aligner.tui.app.SCREENS`), over the same engine calls the command
line uses; the UI itself computes no optics. Import :func:`aligner.tui.app.make_app` to build
the app; this package imports ``textual`` and is never imported by ``import aligner`` or
``aligner --help``.
"""
