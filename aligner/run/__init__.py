"""Running measurements on a bench: schedules, the simulated bench, the detector guard, the
sweep loop, the run log and its reports.

Submodules are imported on use (``from aligner.run.sweep import run_sweep``) so that
``import aligner.run`` stays light.
"""
