"""Calibration from measurements: leak rates from counts with exact intervals, Poisson
maximum-likelihood fits of scans (null, waveplate, leak curve, coupling) and the closed-loop
null search. Submodules are imported on use (``from aligner.fit.null import fit_null``)."""
