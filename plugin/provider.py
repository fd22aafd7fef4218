"""The Fieldcast Processing provider: id ``fieldcast``, holding the toolbox algorithms."""
from __future__ import annotations

from qgis.core import QgsProcessingProvider

from ..algorithms import __version__
from .assess_areas import AssessAreasAlgorithm
from .cross_validate import CrossValidateAlgorithm
from .fit_model import FitModelAlgorithm
from .icons import icon, icon_path
from .predict_many import PredictManyAlgorithm
from .predict_points import PredictPointsAlgorithm
from .predict_surface import PredictSurfaceAlgorithm
from .propose_samples import ProposeSamplesAlgorithm
from .simulate import SimulateAlgorithm

PROVIDER_ICON = "fieldcast.svg"


class FieldcastProvider(QgsProcessingProvider):
    """Processing provider listing Fit covariance model, Predict surface, Predict surfaces for several fields,
    Predict at points, Simulate conditional fields and Cross-validate model."""

    def id(self) -> str:
        return "fieldcast"

    def name(self) -> str:
        return "Fieldcast"

    def longName(self) -> str:
        return f"Fieldcast {__version__}: kriging surfaces with uncertainty"

    def versionInfo(self) -> str:
        return __version__

    def icon(self):
        return icon(PROVIDER_ICON)

    def svgIconPath(self) -> str:
        return icon_path(PROVIDER_ICON)

    def supportedOutputRasterLayerExtensions(self) -> list[str]:
        """Rasters are written as GeoTIFF only."""
        return ["tif"]

    def loadAlgorithms(self) -> None:
        for algorithm in (FitModelAlgorithm(), PredictSurfaceAlgorithm(), PredictManyAlgorithm(),
                          PredictPointsAlgorithm(), SimulateAlgorithm(), CrossValidateAlgorithm(),
                          ProposeSamplesAlgorithm(), AssessAreasAlgorithm()):
            self.addAlgorithm(algorithm)
