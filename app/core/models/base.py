"""What every vocabulary model shares: parameters, fitting, goodness of fit, predictions, error bands.

A model file gives only its formulas: the expected number of types E[V(n)] and the expected spectrum
E[V_m(n)] at any sample size n, the names and ranges of its parameters, and a few initial guesses.
This module turns those formulas into a fitted, serialisable predictor.

Fitting (Baayen 2001, ch. 3; Evert 2004) minimises, at the corpus size N,

    cost = (V - E[V])^2 / E[V] + sum_{m=1}^{M} (V_m - E[V_m])^2 / E[V_m],     M = 15 by default,

as a sum of squared residuals (O - E) / sqrt(E) with scipy.optimize.least_squares, in unconstrained
coordinates (log for a positive parameter, logit for a bounded one), from every initial guess of the model;
the lowest cost wins.

Goodness of fit is the minimum chi-square: X^2(theta) = d' S^-1 d of ``goodness`` minimised over the
parameters, starting from the fitted ones, with the covariance S computed there (one step of generalised
least squares). Why not simply X^2 at the fitted parameters: the cost above treats the counts as
independent, although V and the V_m are strongly correlated (Var[V] is far below E[V]), so at its minimum
X^2 runs far above its chi-square distribution even for samples from the model itself (in simulations
from Zipf-Mandelbrot, finite Zipf-Mandelbrot and GIGP, 40-57% of samples had p < 0.01). The minimum
X^2 follows chi-square with M + 1 - k degrees of freedom (Cramer 1946) and tests whether any member of
the model family fits the spectrum. The predictions keep the parameters of the simple cost: fitting by
X^2 itself ties the fit to V and made the median error of 10x extrapolations of V on real texts 1.5 to 2
times larger (public-domain books, random 10% samples), because no model describes a real text exactly.
"""

from __future__ import annotations

import math
from abc import ABC, abstractmethod
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from functools import cached_property
from typing import Any, ClassVar, Protocol

import numpy as np
from scipy.optimize import least_squares
from scipy.special import expit, logit

from app.core.interpolation import Z95
from app.core.models.goodness import (
    GoodnessOfFit,
    chi_square,
    expected_counts,
    observed_counts,
    whitening,
)
from app.core.spectrum import Spectrum

Params = dict[str, float]
ArrayLike = float | np.ndarray
_BREAKDOWN = 1e8  # residual used where a model's formulas overflow or are undefined
MIN_TYPES_TO_FIT = 10
"""Fewest types a model is fitted to: below that the spectrum holds a handful of non-zero counts, the
parameters are not identified and the optimiser only wanders (a choice of ours)."""
GROWTH_CHECK_FACTOR = 100
"""Fitted parameters are checked for sound expectations up to this many times the corpus size."""


def _minimise(residuals: Callable[[np.ndarray], np.ndarray], starts: list[np.ndarray]) -> np.ndarray | None:
    """argmin of |residuals(theta)|^2 by scipy.optimize.least_squares (trust region) from each start;
    starts where the formulas break down are skipped; None when no start gives a finite result."""
    best = None
    with np.errstate(all="ignore"):
        for theta0 in starts:
            if np.any(residuals(theta0) == _BREAKDOWN):
                continue
            result = least_squares(residuals, theta0, method="trf")
            if not np.any(result.fun == _BREAKDOWN) and (best is None or result.cost < best.cost):
                best = result
    return None if best is None else best.x


def as_output(values: np.ndarray, like: ArrayLike) -> ArrayLike:
    """Return a Python float when the size argument was a scalar, else the array."""
    return float(values) if np.ndim(like) == 0 else values


@dataclass(frozen=True)
class ErrorBand:
    """Relative error of a type-count prediction as a function of the extrapolation factor t = n / N_fit.

    ``factors`` (ascending, > 1) are the factors a backtest extrapolated over and ``rms`` the root mean
    square of its signed relative errors there. Between backtested factors the error is interpolated
    linearly in log t from 0 at t = 1; beyond the largest it grows in proportion to log t (an assumption:
    each further tenfold extrapolation adds as much error as the last). Sizes below N_fit use the error of
    the reciprocal factor. The band is prediction / (1 + e) for e = +-Z95 * rms(t), the range
    of true values whose signed error e = (prediction - truth) / truth would lie within the normal 95% range.
    """

    factors: tuple[float, ...]
    rms: tuple[float, ...]

    def relative_error(self, t: ArrayLike) -> np.ndarray:
        log_t = np.abs(np.log(np.asarray(t, dtype=float)))
        xs = np.concatenate(([0.0], np.log(self.factors)))
        ys = np.concatenate(([0.0], self.rms))
        inside = np.interp(log_t, xs, ys)
        return np.where(log_t > xs[-1], ys[-1] * log_t / xs[-1], inside)

    def limits(self, t: ArrayLike, prediction: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
        e = Z95 * self.relative_error(t)
        with np.errstate(divide="ignore"):
            high = np.where(e < 1, np.asarray(prediction) / np.maximum(1 - e, 0.0), np.inf)
        return np.asarray(prediction) / (1 + e), high

    def as_dict(self) -> dict[str, Any]:
        return {"factors": list(self.factors), "rms_relative_error": list(self.rms)}


class Predictor(Protocol):
    """The verbs every prediction object answers (fitted models and the recommended ensemble)."""

    name: str
    tokens: int

    def types(self, n: ArrayLike) -> ArrayLike: ...

    def spectrum(self, n: float, k_max: int = 20) -> np.ndarray: ...

    def types_low(self, n: ArrayLike) -> ArrayLike: ...

    def types_high(self, n: ArrayLike) -> ArrayLike: ...

    def as_dict(self) -> dict[str, Any]: ...


class BandedPredictions:
    """types_low / types_high from ``types`` and an optional ``band`` (shared by all predictors)."""

    tokens: int
    band: ErrorBand | None

    def types(self, n: ArrayLike) -> ArrayLike:
        raise NotImplementedError

    def _limits(self, n: ArrayLike) -> tuple[ArrayLike, ArrayLike]:
        value = np.asarray(self.types(n), dtype=float)
        if self.band is None:
            return as_output(value, n), as_output(value, n)
        low, high = self.band.limits(np.asarray(n, dtype=float) / self.tokens, value)
        return as_output(low, n), as_output(high, n)

    def types_low(self, n: ArrayLike) -> ArrayLike:
        """Lower end of the backtest error band of E[V(n)] (E[V(n)] itself when there is no band)."""
        return self._limits(n)[0]

    def types_high(self, n: ArrayLike) -> ArrayLike:
        """Upper end of the backtest error band of E[V(n)] (E[V(n)] itself when there is no band)."""
        return self._limits(n)[1]


@dataclass(frozen=True)
class FittedModel(BandedPredictions):
    """A model with its parameters, the corpus size N it was fitted at and the spectrum it was fitted to.

    The goodness of fit is computed when first asked for (backtests never need it).
    """

    model: VocabularyModel
    params: Mapping[str, float] = field(compare=False)
    tokens: int
    spectrum_fitted: Spectrum | None = field(default=None, compare=False, repr=False)
    m_max: int = 15
    band: ErrorBand | None = None

    @property
    def name(self) -> str:
        return self.model.name

    @cached_property
    def goodness_of_fit(self) -> GoodnessOfFit:
        if self.spectrum_fitted is None:
            return GoodnessOfFit(self.m_max, reason="only totals were given: there is no spectrum to test")
        return self.model.goodness_of_fit(self.spectrum_fitted, self.params, self.m_max)

    def types(self, n: ArrayLike) -> ArrayLike:
        """E[V(n)] at any size n (scalar or array)."""
        return as_output(np.asarray(self.model.expected_types(n, self.params), dtype=float), n)

    def spectrum(self, n: float, k_max: int = 20) -> np.ndarray:
        """E[V_k(n)] for k = 1..k_max (index 0 holds k = 1)."""
        return np.asarray(self.model.expected_spectrum(n, np.arange(1, k_max + 1), self.params), dtype=float)

    def as_dict(self) -> dict[str, Any]:
        return {
            "model": self.model.name,
            "title": self.model.title,
            "params": {k: float(v) for k, v in self.params.items()},
            "tokens": self.tokens,
            "goodness_of_fit": self.goodness_of_fit.as_dict(),
            "band": None if self.band is None else self.band.as_dict(),
        }


class VocabularyModel(ABC):
    """A vocabulary model: a formula for E[V(n)] and E[V_m(n)] with named parameters.

    Subclasses set ``name`` (API name), ``title`` (human name), ``parameter_names`` and ``bounds`` (open
    interval of each parameter), and implement ``expected_types``, ``expected_spectrum`` and, when they use
    the shared fit, ``initial_guesses``. Sizes ``n`` and frequencies ``m`` broadcast like NumPy arrays.
    """

    name: ClassVar[str]
    title: ClassVar[str]
    parameter_names: ClassVar[tuple[str, ...]]
    parameter_meanings: ClassVar[dict[str, str]] = {}
    formula: ClassVar[str] = ""
    finite_population: ClassVar[bool] = False
    bounds: ClassVar[dict[str, tuple[float, float]]] = {}

    @abstractmethod
    def expected_types(self, n: ArrayLike, params: Mapping[str, float]) -> ArrayLike:
        """E[V(n)]."""

    @abstractmethod
    def expected_spectrum(self, n: ArrayLike, m: ArrayLike, params: Mapping[str, float]) -> np.ndarray:
        """E[V_m(n)]."""

    def population_size(self, params: Mapping[str, float]) -> float | None:
        """S, the number of types in the whole population, or None when the model's population is infinite
        (vocabulary grows without bound)."""
        return None

    def initial_guesses(self, spectrum: Spectrum) -> list[Params]:
        """Starting points for the shared fit (models with a closed-form fit do not need any)."""
        raise NotImplementedError(f"{self.name} is fitted in closed form")

    def to_unconstrained(self, params: Mapping[str, float]) -> np.ndarray:
        """Map parameters to R^k: log(x - lo) on (lo, inf), logit((x - lo) / (hi - lo)) on (lo, hi)."""
        out = []
        for key in self.parameter_names:
            lo, hi = self.bounds[key]
            x = params[key]
            out.append(math.log(x - lo) if math.isinf(hi) else float(logit((x - lo) / (hi - lo))))
        return np.array(out)

    def from_unconstrained(self, theta: np.ndarray) -> Params:
        """Inverse of ``to_unconstrained``."""
        params = {}
        for key, t in zip(self.parameter_names, theta, strict=True):
            lo, hi = self.bounds[key]
            params[key] = lo + math.exp(t) if math.isinf(hi) else lo + (hi - lo) * float(expit(t))
        return params

    def _residuals(
        self, spectrum: Spectrum, m_max: int, scale: Callable[[np.ndarray, np.ndarray], np.ndarray]
    ) -> Callable[[np.ndarray], np.ndarray]:
        """theta -> scale(O - E, E) over (V, V_1..V_M) at N, or _BREAKDOWN where the formulas break down."""
        observed = observed_counts(spectrum, m_max)
        breakdown = np.full(observed.shape, _BREAKDOWN)

        def residuals(theta: np.ndarray) -> np.ndarray:
            try:
                expected = expected_counts(self, self.from_unconstrained(theta), spectrum.tokens, m_max)
                r = scale(observed - expected, expected)
            except ArithmeticError:
                return breakdown
            return r if np.all(np.isfinite(r)) else breakdown

        return residuals

    def fit(self, spectrum: Spectrum, m_max: int = 15) -> FittedModel:
        """Minimise the cost of the module docstring from every initial guess; the lowest cost wins."""
        if spectrum.types == 0:
            raise ValueError("cannot fit a model to an empty spectrum")
        if spectrum.types < MIN_TYPES_TO_FIT:
            raise ValueError(
                f"{self.name}: {spectrum.types} type(s) are too few to fit a model "
                f"(at least {MIN_TYPES_TO_FIT} are needed)"
            )
        residuals = self._residuals(spectrum, m_max, lambda d, e: d / np.sqrt(np.maximum(e, 1e-12)))
        best = _minimise(residuals, [self.to_unconstrained(g) for g in self.initial_guesses(spectrum)])
        if best is None:
            raise ValueError(f"{self.name}: no initial guess led to a finite cost")
        params = self.from_unconstrained(best)
        self.check_growth(params, spectrum.tokens)
        return FittedModel(self, params, spectrum.tokens, spectrum, m_max)

    def check_growth(self, params: Mapping[str, float], tokens: int) -> None:
        """Raise ValueError unless E[V(n)] is finite, within [0, n] and non-decreasing for n from 1 to
        ``GROWTH_CHECK_FACTOR`` x ``tokens`` (any mixture of Poisson samples obeys this), and E[V_k(N)] is
        finite and non-negative. Extreme parameters can break it in floating point (GIGP with b near 0:
        S (1 - ratio) with a huge S and a ratio within 1e-16 of 1); the model is then left out rather than
        shown with impossible numbers."""
        n = np.unique(np.rint(np.geomspace(1, GROWTH_CHECK_FACTOR * tokens, 80)))
        with np.errstate(all="ignore"):
            types = np.asarray(self.expected_types(n, params), dtype=float)
            legomena = np.asarray(
                self.expected_spectrum(float(tokens), np.arange(1, 21), params), dtype=float
            )
        sound = (
            np.all(np.isfinite(types))
            and np.all(types >= 0)
            and np.all(types <= n * (1 + 1e-9))
            and np.all(np.diff(types) >= -1e-9 * types[1:])
            and np.all(np.isfinite(legomena))
            and np.all(legomena >= 0)
        )
        if not sound:
            shown = ", ".join(f"{k} = {v:.3g}" for k, v in params.items())
            raise ValueError(
                f"{self.name}: the fitted parameters ({shown}) give impossible expectations (negative, "
                "decreasing or not finite) in floating point; the model is left out for this corpus"
            )

    def goodness_of_fit(
        self, spectrum: Spectrum, params: Mapping[str, float], m_max: int = 15
    ) -> GoodnessOfFit:
        """Minimum chi-square over the parameters, from ``params`` (module docstring; ``goodness``)."""
        whiten = whitening(self, params, spectrum.tokens, m_max)
        best = None
        if whiten is not None:
            residuals = self._residuals(spectrum, m_max, lambda d, _: whiten(d))
            best = _minimise(residuals, [self.to_unconstrained(params)])
        at = params if best is None else self.from_unconstrained(best)
        return chi_square(self, at, spectrum, m_max, len(self.parameter_names))

    def __repr__(self) -> str:
        return f"{type(self).__name__}()"
