"""Vocabulary models: one file per model, registered here so that pages and the API iterate over them.

Adding a model = one short file (formulas, parameter names, initial guesses) + one line in ``MODELS``.
"""

from app.core.models.base import ErrorBand, FittedModel, Predictor, VocabularyModel
from app.core.models.finite_zipf_mandelbrot import FiniteZipfMandelbrot
from app.core.models.gigp import GIGP
from app.core.models.goodness import GoodnessOfFit
from app.core.models.heaps import Heaps
from app.core.models.perfect_zipf import PerfectZipf, PerfectZipfTotals, fit_from_totals
from app.core.models.population_spectrum import PopulationSpectrum
from app.core.models.zipf_mandelbrot import ZipfMandelbrot

MODELS: dict[str, VocabularyModel] = {
    model.name: model
    for model in (
        PerfectZipf(),
        PerfectZipfTotals(),
        Heaps(),
        ZipfMandelbrot(),
        FiniteZipfMandelbrot(),
        GIGP(),
        PopulationSpectrum(),
    )
}

__all__ = [
    "MODELS",
    "ErrorBand",
    "FittedModel",
    "GoodnessOfFit",
    "Predictor",
    "VocabularyModel",
    "fit_from_totals",
]
