"""Predictions for a bench: weak value, leak rate, amplification, detector rates, signal to noise,
and where the amplification stops growing.

Modules: :mod:`.core` (:func:`predict`, :class:`Prediction`), :mod:`.readout` (axis, units,
amplification), :mod:`.pointer` (how the sensor reads the pointer), :mod:`.detector` (rates
and warnings), :mod:`.snr` (the SNR figures), :mod:`.limits` (where the amplification stops,
and the warning for a target beyond it), :mod:`.advice` (what a target would need),
:mod:`.working_point` (the imbalance with the best SNR), :mod:`.block` (the JSON block),
:mod:`.reference` (the density-matrix definition the fast path is tested against). The null
is defined once in :mod:`aligner.nulls`.

Conventions (shown wherever these numbers appear):

* ``leak_rate``: exact post-selection probability per source photon (pointer overlap, analyzer
  transmission and extinction included; detector efficiency excluded).
* Amplification axis: a position or phase readout measures ``Re A_w`` (axis ``"re"``), a
  momentum readout ``Im A_w`` (axis ``"im"``) (Jozsa, Phys. Rev. A 76, 044103 (2007)); with a
  kick or a readout geometry, the part the detector's linear response weighs more.
  "linear" amplification is ``Re A_w`` or ``Im A_w``; "exact" is the all-orders pointer
  response at the coupling plane, ``<q>/g`` for ``"re"`` and ``<p>/(g/(2 sigma^2))`` for
  ``"im"`` (:func:`aligner.model.coupling_scale`; a kick is a shift of the momentum). The
  phase readout is a coherent probe of N photons: its pointer variable is the probe phase,
  its width ``1/(2 sqrt N)`` rad, exact in the photon-number basis up to
  :data:`aligner.physics.phase.MAX_PHOTONS` photons, with the mean cross-phase compensated
  (:mod:`.pointer`).
* ``pointer_shift``: the mean reading at the sensor in the bench's units (``<p>`` in 1/units
  for a momentum readout): after the readout geometry, and for a split or quadrant detector
  its difference over sum calibrated with the slope at the centre. ``practical_amplification``
  divides it by the standard measurement's shift at the same sensor (Dixon et al. 2009).
* Signal to noise (:mod:`.snr`): the centroid's SNR with the exact post-selected spread, the
  events the pointer is read from (counter with dark counts, heralded coincidences, or a
  camera) and the technical noise; the Cramer-Rao bound of the post-selected events and of
  both ports; a switched measurement under 1/f noise.
* The standard measurement it is compared with: no analyzer, the same photons, pointer,
  readout and sensor, the input in the eigenstate of ``A`` with the larger ``|eigenvalue|``.
"""

from __future__ import annotations

from ..nulls import find_null
from .block import block_of, prediction_block
from .core import Prediction, predict
from .detector import detector_flags, detector_rates
from .limits import MECHANISMS, SETTING, Limits, MechanismLimit, beyond_limit, limits
from .readout import READOUT_AXIS, amplification, format_weak_value, readout_axis, readout_units
from .snr import (
    snr_per_sqrt_s,
    standard_information_snr,
    standard_snr_per_sqrt_s,
)
from .working_point import Best, SnrChoice, best_snr_imbalance

__all__ = [
    "MECHANISMS",
    "READOUT_AXIS",
    "SETTING",
    "Best",
    "Limits",
    "MechanismLimit",
    "Prediction",
    "SnrChoice",
    "amplification",
    "best_snr_imbalance",
    "beyond_limit",
    "block_of",
    "detector_flags",
    "detector_rates",
    "find_null",
    "format_weak_value",
    "limits",
    "predict",
    "prediction_block",
    "readout_axis",
    "readout_units",
    "snr_per_sqrt_s",
    "standard_information_snr",
    "standard_snr_per_sqrt_s",
]
