"""Live drag and rolling-resistance estimation, change alarms, coast-down, batch fit.

Public API:

* :class:`LiveDragEstimator` ``(ride)``: ``feed(sample)``, ``snapshot()`` ->
  :class:`DragEstimate`, ``pop_alarms()`` -> list of :class:`DragAlarm`;
* :func:`batch_fit` ``(samples, ride)`` -> :class:`BatchFit`;
* :func:`coastdown_fit` ``(samples, ride)`` -> :class:`CoastdownResult`;
* :func:`calibrate_circumference` ``(samples, ...)`` -> :class:`CircumferenceCalibration`.

Names are imported lazily so that reading the ``[estimator]`` section of a
ride file does not import the estimator.
"""

from __future__ import annotations

import importlib
from typing import Any

_EXPORTS = {
    "LiveDragEstimator": "livecoach.estimate.drag",
    "DragEstimate": "livecoach.estimate.records",
    "DragAlarm": "livecoach.estimate.records",
    "BatchFit": "livecoach.estimate.records",
    "EnergyWindow": "livecoach.estimate.records",
    "batch_fit": "livecoach.estimate.batch",
    "BatchFitError": "livecoach.estimate.batch",
    "EstimatorConfig": "livecoach.estimate.settings",
    "coastdown_fit": "livecoach.estimate.coastdown",
    "CoastdownResult": "livecoach.estimate.coastdown",
    "calibrate_circumference": "livecoach.estimate.calibration",
    "CircumferenceCalibration": "livecoach.estimate.calibration",
}

__all__ = sorted(_EXPORTS)


def __getattr__(name: str) -> Any:
    if name in _EXPORTS:
        return getattr(importlib.import_module(_EXPORTS[name]), name)
    raise AttributeError(f"module 'livecoach.estimate' has no attribute {name!r}")
