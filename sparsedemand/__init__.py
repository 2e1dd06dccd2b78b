"""sparsedemand: forecasting and stocking intermittent demand."""

from __future__ import annotations

__version__ = "0.1.0"

from .errors import InputError
from .panel import DemandPanel, as_panel

__all__ = ["__version__", "InputError", "DemandPanel", "as_panel"]
