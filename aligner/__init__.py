"""aligner: plan, align and log weak-value amplification on polarization interferometers.

The notebook API is imported lazily so that ``import aligner`` stays light (no numpy, scipy,
sympy or textual until a function is used)::

    import aligner
    bench = aligner.load_bench("demo")
    p = aligner.predict(bench, {"analyzer": 136.0})
"""

from __future__ import annotations

import importlib
from typing import Any

__version__ = "0.1.0"

# public name -> module that defines it
_LAZY = {
    "load_bench": "aligner.bench",
    "Bench": "aligner.bench",
    "forward": "aligner.model",
    "predict": "aligner.prediction",
    "Prediction": "aligner.prediction",
    "plan": "aligner.planning",
    "Plan": "aligner.planning",
}

__all__ = sorted([*_LAZY, "__version__"])


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        return getattr(importlib.import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'aligner' has no attribute {name!r}")


def __dir__() -> list[str]:
    return __all__
