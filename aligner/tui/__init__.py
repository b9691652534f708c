"""The operator's desk: a Textual terminal UI for one bench (``aligner desk BENCH``).

Four screens (bench, plan, sweep, log) over the same engine calls the command line uses; the
UI itself computes nothing. Import :func:`aligner.tui.app.make_app` to build the app; this
package imports ``textual`` and is never imported by ``import aligner`` or ``aligner --help``.
"""
