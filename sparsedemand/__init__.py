"""sparsedemand: forecasting and stocking intermittent demand.

The pipeline, one module per stage: :mod:`~sparsedemand.io` (read, validate,
calendar) -> :mod:`~sparsedemand.panel` -> :mod:`~sparsedemand.classify` ->
:mod:`~sparsedemand.methods` -> :mod:`~sparsedemand.route` ->
:mod:`~sparsedemand.evaluate` -> :mod:`~sparsedemand.stock` ->
:mod:`~sparsedemand.report`.

Examples
--------
>>> import numpy as np, sparsedemand as sd
>>> sd.classify(np.array([[0, 3, 0, 0, 2, 0, 4, 0, 0, 3.0]]))["pattern"].tolist()
['intermittent']
"""

from __future__ import annotations

import importlib

from ._version import __version__
from .errors import InputError
from .io import as_panel
from .panel import DemandPanel
from .classify import classify  # eager: the function must shadow its module's name

# Heavier stages (numba kernels) load on first use, so `import sparsedemand` stays quick.
_LAZY = {
    "read_demand": "io",
    "from_frame": "io",
    "Columns": "io",
    "forecast": "route",
    "backtest": "evaluate",
    "stock_targets": "stock",
    "build_report": "report",
    "make_demo": "demo",
}

__all__ = ["__version__", "InputError", "DemandPanel", "as_panel", "classify", *_LAZY]


def __getattr__(name: str):
    if name in _LAZY:
        module = importlib.import_module(f".{_LAZY[name]}", __name__)
        return getattr(module, name)
    raise AttributeError(f"module 'sparsedemand' has no attribute {name!r}")
