"""The correlation report: ``write_report(corr, folder)`` writes report.html and its files.

See :mod:`correlate.report.document` (HTML), :mod:`correlate.report.figures` (matplotlib plots)
and :mod:`correlate.report.scene` (PyVista 3D views and VTK files).
"""

from __future__ import annotations

from correlate.report.document import write_report

__all__ = ["write_report"]
