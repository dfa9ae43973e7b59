"""The post-ride report: one self-contained HTML page with embedded PNG figures.

* :mod:`livecoach.report.series` — the trace as arrays; trap result, sensor
  timelines, power-balance residuals (pure).
* :mod:`livecoach.report.plots` — the figures (matplotlib, Agg; imported only here).
* :mod:`livecoach.report.build` — :func:`build_report` writes ``report.html``.
"""

from livecoach.report.build import REPORT_NAME, build_report

__all__ = ["REPORT_NAME", "build_report"]
