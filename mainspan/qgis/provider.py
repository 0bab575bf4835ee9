"""The ``mainspan`` processing provider: plan, check, compare, export, report."""

from __future__ import annotations

from qgis.core import QgsProcessingProvider

from .algorithms import ICON_PATH, icon  # noqa: F401 - re-exported: the provider's icon

__all__ = ["MainspanProvider", "icon", "ICON_PATH"]


class MainspanProvider(QgsProcessingProvider):
    """Processing provider ``mainspan``: one algorithm per mainspan command."""

    def id(self):
        return "mainspan"

    def name(self):
        return "mainspan"

    def longName(self):                 # noqa: N802 - QGIS API
        from .. import __version__
        return f"mainspan {__version__}: networks of mains over real ground"

    def icon(self):
        return icon()

    def loadAlgorithms(self):           # noqa: N802
        from .algorithms import CheckAlgorithm, PlanAlgorithm
        from .handoff import CompareAlgorithm, ExportAlgorithm, ReportAlgorithm

        for cls in (PlanAlgorithm, CheckAlgorithm, CompareAlgorithm, ExportAlgorithm,
                    ReportAlgorithm):
            self.addAlgorithm(cls())
