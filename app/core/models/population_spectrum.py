"""The population-spectrum model: the population's frequency spectrum recovered by linear programming.

After Valiant & Valiant, "Estimating the unseen" (STOC 2011; with improved estimators, NIPS 2013 and
J. ACM 64, 2017): instead of assuming a parametric type density, find a histogram of population frequencies
that explains the observed spectrum (the "fingerprint", V_1, V_2, ...) by linear programming.

The population is described by a histogram: h_j types whose relative frequency is x_j, for a geometric grid
x_j = lambda_j / N with lambda_j (the expected count at the corpus size N) from LAMBDA_MIN to M (the highest
frequency fitted), plus the frequent types, those seen more than M times, each kept directly at its observed
relative frequency f / N. A random sample of n tokens of a population of N' tokens is binomial thinning
with p = n / N'; as N' grows (N' -> infinity with x fixed) a type of relative frequency x is seen
Binomial(N' x, n / N') -> Poisson(n x) times, so

    E[V(n)]   = sum_j h_j (1 - e^(-n x_j)),
    E[V_m(n)] = sum_j h_j e^(-n x_j) (n x_j)^m / m!                       (sum over grid and frequent types).

Fit at the corpus size N (``recover``), with a_mj = e^(-lambda_j) lambda_j^m / m! and weights
w_m = 1 / sqrt(V_m + 1):

1. minimise the discrepancy  D(h) = sum_{m=1}^{M} w_m |V_m - sum_j a_mj h_j|
   subject to h >= 0 and the token total  sum_j lambda_j h_j = N - (tokens of the frequent types);
2. with D(h) <= D* + SLACK_PER_ROW x (number of non-empty V_m, m <= M), minimise and then maximise the
   number of types sum_j h_j: the lower and the upper solutions, both consistent with the data. The
   prediction is their midpoint (a feasible histogram too, the constraints being convex), and the two
   solutions are kept as the model's own range (``expected_types(n, params, "lower" or "upper")``).

Known limitation (measured in tests/core/test_backtest.py): on a nearly exhausted finite population the
upper solution puts many types at the rarest grid frequency, and the midpoint overshoots (about +15% at 10x
on a simulated finite Zipf-Mandelbrot corpus whose types are 90% seen).

The linear programs are solved by scipy.optimize.linprog with the HiGHS solver. Types far rarer than 1/N
are nearly invisible in a corpus of N tokens, so the two solutions part as the prediction goes further
beyond N; their distance is what the data leave undecided.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.special import gammaln

from app.core.models.base import ArrayLike, Params, VocabularyModel, as_output
from app.core.models.goodness import GoodnessOfFit
from app.core.spectrum import Spectrum

FITTED_FREQUENCIES = 20
"""M: V_1..V_M are explained by the histogram; types seen more often are kept as they are (a choice of
ours: at M = 20 a type's count is known to within about 1 / sqrt(20) = 22%)."""
LAMBDA_MIN = 0.05
"""Smallest expected count at size N on the grid (types rarer than that are seen with probability < 5%).
A choice measured with benchmarks/accuracy.py: a grid reaching further down (0.005, 0.02) left the
midpoint as unbiased but twice as noisy at 10x."""
GRID_RATIO = 1.1
"""Ratio between neighbouring grid frequencies."""
SAMPLED_FREQUENCIES = 3 * FITTED_FREQUENCIES
"""Frequencies up to which the grid's types are drawn in ``sample_spectrum`` (beyond, their chance is tiny:
the grid ends at an expected count of FITTED_FREQUENCIES)."""
SLACK_PER_ROW = 0.3
"""How far the lower and upper solutions may exceed the best weighted discrepancy, per non-empty fitted row
V_m. Each row's weighted residual is of order 1 from sampling alone (sd of V_m about sqrt(V_m)), so the
slack stays well inside the noise; measured with benchmarks/accuracy.py, a slack of 0.3 per row made the
midpoint 2-3 times less noisy at 10x than a slack near 0 (whose solutions are arbitrary vertices of an
almost degenerate program), without bias."""


@dataclass(frozen=True)
class RecoveredPopulation:
    """Grid of expected counts ``lam`` at size ``tokens`` with the lower and upper type counts per grid
    point, the frequent types as (count, number of types) and the best discrepancy."""

    tokens: int
    lam: np.ndarray
    low: np.ndarray
    high: np.ndarray
    frequent_counts: np.ndarray
    frequent_types: np.ndarray
    discrepancy: float


def _poisson_matrix(lam: np.ndarray, m: np.ndarray) -> np.ndarray:
    """a_mj = e^(-lambda_j) lambda_j^m / m!, in log space (rows m, columns j)."""
    lam = np.asarray(lam, dtype=float)
    m = np.asarray(m, dtype=float)[:, None]
    with np.errstate(divide="ignore"):
        log_a = -lam + m * np.log(lam) - gammaln(m + 1)
    return np.exp(log_a)


def recover(spectrum: Spectrum, m_max: int) -> RecoveredPopulation:
    """The lower and upper histograms of the module docstring (three linear programs)."""
    from scipy.optimize import linprog  # imported on first use: a server starts without it

    N = spectrum.tokens
    frequent = spectrum.m > m_max
    observed = spectrum.dense(m_max).astype(float)
    rare_tokens = float(np.dot(spectrum.m[~frequent], spectrum.vm[~frequent]))
    top = float(min(m_max, max(spectrum.m[~frequent].max(initial=1), 1)))
    lam = LAMBDA_MIN * GRID_RATIO ** np.arange(
        int(np.ceil(np.log(top / LAMBDA_MIN) / np.log(GRID_RATIO))) + 1
    )
    J, M = lam.size, m_max
    a = _poisson_matrix(lam, np.arange(1, M + 1))
    w = 1 / np.sqrt(observed + 1)
    # Variables: h (J) then e (M) with e_m >= |V_m - (A h)_m|, as two inequalities per row.
    scale = max(spectrum.types, 1)  # h in units of the observed types keeps the programs well scaled
    a_ub = np.block([[a * scale, -np.eye(M)], [-a * scale, -np.eye(M)]])
    b_ub = np.concatenate([observed, -observed])
    a_eq = np.concatenate([lam * scale, np.zeros(M)])[None, :]
    b_eq = np.array([rare_tokens])
    cost = np.concatenate([np.zeros(J), w])
    best = linprog(cost, A_ub=a_ub, b_ub=b_ub, A_eq=a_eq, b_eq=b_eq, method="highs")
    if best.status != 0:
        raise ValueError(f"population_spectrum: the discrepancy program failed ({best.message})")
    bound = best.fun + SLACK_PER_ROW * np.count_nonzero(observed)
    a_ub2 = np.vstack([a_ub, cost[None, :]])
    b_ub2 = np.concatenate([b_ub, [bound]])
    count = np.concatenate([np.ones(J), np.zeros(M)])
    solutions = []
    for sign in (1.0, -1.0):
        result = linprog(sign * count, A_ub=a_ub2, b_ub=b_ub2, A_eq=a_eq, b_eq=b_eq, method="highs")
        solutions.append(result.x[:J] * scale if result.status == 0 else best.x[:J] * scale)
    return RecoveredPopulation(
        N,
        lam,
        solutions[0],
        solutions[1],
        spectrum.m[frequent].astype(float),
        spectrum.vm[frequent].astype(float),
        float(best.fun),
    )


class PopulationSpectrum(VocabularyModel):
    """Histogram of population frequencies recovered by linear programming (module docstring; Valiant &
    Valiant 2017)."""

    name = "population_spectrum"
    title = "recovered population spectrum (linear programming)"
    parameter_names = ("lower_types", "upper_types", "discrepancy")
    formula = (
        "population histogram h_j at relative frequencies x_j (linear programming); "
        "E[V(n)] = sum_j h_j (1 - exp(-n x_j)), E[V_m(n)] = sum_j h_j exp(-n x_j) (n x_j)^m / m!"
    )
    parameter_meanings = {
        "lower_types": "types of the population in the solution with the fewest types consistent with the spectrum",
        "upper_types": "types of the population in the solution with the most types consistent with the spectrum",
        "discrepancy": "the weighted distance between the observed and the recovered spectrum (the fit's minimum)",
    }
    finite_population = True
    bounds = {"lower_types": (0.0, np.inf), "upper_types": (0.0, np.inf), "discrepancy": (-np.inf, np.inf)}
    """Type counts are positive; the discrepancy, a weighted sum of absolute values, is checked for being
    >= 0 in ``derived_problem`` (0 is a perfect fit, not the edge of an open domain)."""

    def derived_problem(self, params: Mapping[str, Any], tokens: int) -> str | None:
        """The fewest types consistent with the spectrum cannot exceed the most; the discrepancy is >= 0;
        every type count of the histogram is >= 0."""
        if not params["lower_types"] <= params["upper_types"] * (1 + 1e-9):
            return f"its lower population {params['lower_types']:,.1f} exceeds its upper {params['upper_types']:,.1f}"
        if params["discrepancy"] < 0:
            return f"its discrepancy {params['discrepancy']:.4g} is negative"
        histogram = np.concatenate([params["lower"], params["upper"], params["frequent_types"]])
        if np.any(np.asarray(histogram, dtype=float) < -1e-9 * max(params["upper_types"], 1.0)):
            return "its histogram holds a negative number of types"
        return None

    def estimate(self, spectrum: Spectrum, m_max: int = 15) -> Params:
        """Three linear programs (``recover``) instead of the shared least squares."""
        pop = recover(spectrum, FITTED_FREQUENCIES)
        return {
            "lower_types": float(pop.low.sum() + pop.frequent_types.sum()),
            "upper_types": float(pop.high.sum() + pop.frequent_types.sum()),
            "discrepancy": pop.discrepancy,
            "frequency": (pop.lam / pop.tokens).tolist(),
            "lower": pop.low.tolist(),
            "upper": pop.high.tolist(),
            "frequent_frequency": (pop.frequent_counts / pop.tokens).tolist(),
            "frequent_types": pop.frequent_types.tolist(),
        }

    @staticmethod
    def _histogram(params: Mapping[str, Any], side: str = "mid") -> tuple[np.ndarray, np.ndarray]:
        """(relative frequencies x, types h) of the whole population, the frequent types included."""
        low, high = np.asarray(params["lower"], dtype=float), np.asarray(params["upper"], dtype=float)
        h = {"lower": low, "upper": high}.get(side, (low + high) / 2)
        x = np.concatenate([np.asarray(params["frequency"], dtype=float), params["frequent_frequency"]])
        return x, np.concatenate([h, np.asarray(params["frequent_types"], dtype=float)])

    def expected_types(self, n: ArrayLike, params: Mapping[str, Any], side: str = "mid") -> ArrayLike:
        x, h = self._histogram(params, side)
        n_arr = np.asarray(n, dtype=float)
        values = -np.expm1(-np.multiply.outer(n_arr, x)) @ h
        return as_output(values, n)

    def expected_spectrum(
        self, n: ArrayLike, m: ArrayLike, params: Mapping[str, Any], side: str = "mid"
    ) -> np.ndarray:
        x, h = self._histogram(params, side)
        n_arr, m_arr = np.broadcast_arrays(np.asarray(n, dtype=float), np.asarray(m, dtype=float))
        out = np.empty(n_arr.shape)
        for size in np.unique(n_arr):
            here = n_arr == size
            out[here] = _poisson_matrix(size * x, m_arr[here]) @ h
        return out

    def sample_spectrum(self, n: int, params: Mapping[str, Any], rng: np.random.Generator) -> Spectrum:
        """The spectrum of a random sample of about n tokens from the midpoint histogram, under Poisson
        sampling with a Poisson number of types per grid point: then the V_m of the grid's types are
        independent Poisson(E[V_m(n)]) counts (the counts of a Poisson process of types), drawn directly for
        m up to SAMPLED_FREQUENCIES; each frequent type's count is Poisson(n x)."""
        grid = np.asarray(params["frequency"], dtype=float)
        h = (np.asarray(params["lower"], dtype=float) + np.asarray(params["upper"], dtype=float)) / 2
        m = np.arange(1, SAMPLED_FREQUENCIES + 1)
        counts = rng.poisson(_poisson_matrix(n * grid, m) @ h)
        frequent = np.repeat(
            np.asarray(params["frequent_frequency"], dtype=float),
            np.rint(np.asarray(params["frequent_types"], dtype=float)).astype(np.int64),
        )
        frequencies = np.concatenate([np.repeat(m, counts), rng.poisson(n * frequent)])
        return Spectrum.from_frequencies(frequencies[frequencies > 0])

    def population_size(self, params: Mapping[str, Any]) -> float | None:
        """The midpoint histogram's number of types (finite by construction)."""
        return (params["lower_types"] + params["upper_types"]) / 2

    def goodness_of_fit(
        self, spectrum: Spectrum, params: Mapping[str, Any], m_max: int = 15
    ) -> GoodnessOfFit:
        reason = (
            "the recovered histogram has as many free values as grid points, so the chi-square test of a "
            "parametric family does not apply; the weighted discrepancy of the best fit is "
            f"{params['discrepancy']:.3g}"
        )
        return GoodnessOfFit(m_max, reason=reason)
