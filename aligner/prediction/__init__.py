"""Predictions for a bench: weak value, leak rate, amplification, detector rates, signal to noise,
and where the amplification stops growing.

Modules: :mod:`.core` (:func:`predict`, :class:`Prediction`), :mod:`.readout` (axis, units,
amplification), :mod:`.detector` (rates and warnings), :mod:`.snr` (the SNR model),
:mod:`.limits` (where the amplification stops), :mod:`.working_point` (the imbalance with the
best SNR), :mod:`.block` (the JSON block), :mod:`.reference` (the density-matrix definition the
fast path is tested against). The null is defined once in :mod:`aligner.nulls`.

Conventions (shown wherever these numbers appear):

* ``leak_rate``: exact post-selection probability per source photon (pointer overlap, analyzer
  transmission and extinction included; detector efficiency excluded).
* Amplification axis: a position or phase readout measures ``Re A_w`` (axis ``"re"``), a
  momentum readout ``Im A_w`` (axis ``"im"``) (Jozsa, Phys. Rev. A 76, 044103 (2007)).
  "linear" amplification is ``Re A_w`` or ``Im A_w``; "exact" is the all-orders pointer
  response, ``<q>/g`` for ``"re"`` and ``<p>/(g/(2 sigma^2))`` for ``"im"``. The phase readout
  is a coherent probe of N photons: its pointer variable is the probe phase (rad), its width
  ``1/(2 sqrt N)``.
* ``pointer_shift``: ``<q>`` in the bench's units (``<p>`` in 1/units for a momentum readout).
* Signal to noise of the coupling estimate per sqrt(second): ``g d<r>/dg f / sqrt(s^2/m + j^2)``
  with ``<r>`` the mean readout shift, ``s`` the per-photon pointer spread, ``m`` the counted
  rate, ``f`` the share of counts that are signal (dark counts carry no shift) and ``j`` the
  technical pointer jitter (``coupling.jitter_rms``; in 1/units for a momentum readout). The
  post-selected pointer spread is taken as the prepared one (exact in the weak regime).
* The standard measurement it is compared with: no analyzer, the same photons, pointer and
  detector, the input in the eigenstate of ``A`` with the larger ``|eigenvalue|``, read in
  position (so it reaches ``|a| g`` per photon).
"""

from __future__ import annotations

from ..nulls import find_null
from .block import block_of, prediction_block
from .core import Prediction, predict
from .detector import detector_flags, detector_rates
from .limits import MECHANISMS, SETTING, Limits, MechanismLimit, limits
from .readout import READOUT_AXIS, amplification, format_weak_value, readout_axis, readout_units
from .snr import snr_per_sqrt_s, standard_snr_per_sqrt_s
from .working_point import SnrChoice, best_snr_imbalance

__all__ = [
    "MECHANISMS",
    "READOUT_AXIS",
    "SETTING",
    "Limits",
    "MechanismLimit",
    "Prediction",
    "SnrChoice",
    "amplification",
    "best_snr_imbalance",
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
    "standard_snr_per_sqrt_s",
]
