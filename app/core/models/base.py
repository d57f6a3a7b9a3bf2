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
from scipy.special import expit, logit, ndtri

from app.core.models.goodness import (
    GoodnessOfFit,
    chi_square,
    expected_counts,
    observed_counts,
    whitening,
)
from app.core.spectrum import Spectrum
from app.core.validity import first_problem, parameter_problem

Params = dict[str, Any]
"""Named parameters: numbers, or sequences of numbers for a model described by a histogram."""
ArrayLike = float | np.ndarray
_BREAKDOWN = 1e8  # residual used where a model's formulas overflow or are undefined
MIN_TYPES_TO_FIT = 10
"""Fewest types a model is fitted to: below that the spectrum holds a handful of non-zero counts, the
parameters are not identified and the optimiser only wanders (a choice of ours)."""
POPULATION_FIT_MIN_TOKENS = 1_000
"""Fewest tokens a parametric population model (two or three parameters fitted by least squares) is fitted
to: on fewer the spectrum holds a handful of classes, the fit does not identify its parameters and each try
costs much of the time a draft's report may take (a choice of ours)."""
GROWTH_CHECK_FACTOR = 100
"""Fitted parameters are checked for sound expectations up to this many times the corpus size."""
EDGE_SHARE = 1e-3
"""A parameter whose domain ends are limiting cases of its model (``VocabularyModel.edge_parameters``) has
ended at the edge when it lies within this share of its domain's width from an end. The least-squares fit
runs in logit coordinates, where such an end is at infinity: a fit beyond |logit| = 6.9 has drifted towards
the limit instead of finding an interior minimum (a choice of ours: the edge parameters fitted to the six demo
corpora and the real text of the tests end either at least 1.4% of the width from an end or within 1.2e-7 of
it, the saturating vocabularies of the tests within 1e-7)."""


def _minimise(residuals: Callable[[np.ndarray], np.ndarray], starts: list[np.ndarray]) -> np.ndarray | None:
    """argmin of |residuals(theta)|^2 by scipy.optimize.least_squares (trust region) from each start;
    starts where the formulas break down are skipped, as are runs the solver stops because a step met them
    (scipy refuses a Jacobian that is not finite with a ValueError); None when no start gives a finite result."""
    from scipy.optimize import least_squares  # imported on first use: a server starts without it

    best = None
    with np.errstate(all="ignore"):
        for theta0 in starts:
            if np.any(residuals(theta0) == _BREAKDOWN):
                continue
            try:
                result = least_squares(residuals, theta0, method="trf")
            except ValueError:
                continue
            if not np.any(result.fun == _BREAKDOWN) and (best is None or result.cost < best.cost):
                best = result
    return None if best is None else best.x


def as_output(values: np.ndarray, like: ArrayLike) -> ArrayLike:
    """Return a Python float when the size argument was a scalar, else the array."""
    return float(values) if np.ndim(like) == 0 else values


RANGE_LEVEL = 0.9
"""Nominal coverage of every prediction range."""
Z90 = float(ndtri(0.5 + RANGE_LEVEL / 2))  # 1.645, the standard normal 95% quantile
RANGE_METHOD = (
    "nominal 90% range: the prediction times exp(-+1.645 sqrt(s^2 + b^2 [+ d^2])), where s is the standard deviation "
    "of this model's own log prediction over parametric bootstrap replicates (samples of N tokens drawn "
    "from the recovered population spectrum, each refitted) and b this model's mean log error in the random "
    "backtests of this corpus at the same extrapolation factor (its bias); for the recommended average also "
    "the weighted spread of its members' predictions; beyond N never below the types already observed"
)


def log_factor_curve(factors: tuple[float, ...], values: tuple[float, ...], t: ArrayLike) -> np.ndarray:
    """A non-negative error known at extrapolation factors t_i > 1 (ascending), as a function of t: linear in
    log t from 0 at t = 1 through the running maximum of the values (a farther extrapolation is never
    trusted more than a nearer one, even where its few backtests happened to err less); beyond the largest
    factor in proportion to log t (an assumption: each further tenfold extrapolation adds as much as the
    last); below 1 that of the reciprocal factor."""
    log_t = np.abs(np.log(np.asarray(t, dtype=float)))
    xs = np.concatenate(([0.0], np.log(factors)))
    ys = np.maximum.accumulate(np.concatenate(([0.0], values)))
    inside = np.interp(log_t, xs, ys)
    return np.where(log_t > xs[-1], ys[-1] * log_t / xs[-1], inside)


@dataclass(frozen=True)
class ErrorBand:
    """Error of a type-count prediction as a function of the extrapolation factor t = n / N_fit, in log
    units: the log error of a prediction is log(prediction / truth) (about its relative error when small).

    ``factors`` (ascending, > 1) are the factors a random backtest extrapolated over, ``rms`` the root mean
    square and ``bias`` the mean of its log errors there; ``sampling_factors`` and ``sampling_sd`` the
    standard deviation of the log prediction over parametric bootstrap replicates
    (``app.core.backtest.bootstrap_spreads``). Each curve is ``log_factor_curve``.

    The range is the nominal 90% range prediction x exp(-e) .. prediction x exp(+e), e = Z90 sqrt(s(t)^2 +
    b(t)^2 + d(t)^2): s the sampling spread of the data (bootstrap), b the model's own bias (backtests),
    added as an independent error of unknown sign, and for an average of models d the weighted standard
    deviation of its members' log predictions around it (``between_sd`` at ``between_factors``; the
    between-model term of the variance of a model average, Hoeting, Madigan, Raftery & Volinsky 1999, eq.
    2), 0 for a single model. Log units keep both ends positive and finite however large the error (a
    relative range prediction / (1 -+ e) loses its upper end once e >= 1). Without a bootstrap (a corpus
    too small for one) the backtest RMS stands in for s and b.
    """

    factors: tuple[float, ...]
    rms: tuple[float, ...]
    bias: tuple[float, ...] = ()
    sampling_factors: tuple[float, ...] = ()
    sampling_sd: tuple[float, ...] = ()
    between_factors: tuple[float, ...] = ()
    between_sd: tuple[float, ...] = ()

    def log_error(self, t: ArrayLike) -> np.ndarray:
        """The backtest RMS log error at factor t."""
        return log_factor_curve(self.factors, self.rms, t)

    def half_width(self, t: ArrayLike) -> np.ndarray:
        """e(t) of the class docstring."""
        d = log_factor_curve(self.between_factors, self.between_sd, t) if self.between_factors else 0.0
        if not self.sampling_factors or not self.bias:
            return Z90 * np.sqrt(self.log_error(t) ** 2 + d**2)
        s = log_factor_curve(self.sampling_factors, self.sampling_sd, t)
        b = log_factor_curve(self.factors, tuple(abs(v) for v in self.bias), t)
        return Z90 * np.sqrt(s**2 + b**2 + d**2)

    def limits(self, t: ArrayLike, prediction: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
        """prediction x exp(-e(t)) and prediction x exp(+e(t))."""
        e = self.half_width(t)
        return np.asarray(prediction) * np.exp(-e), np.asarray(prediction) * np.exp(e)

    def as_dict(self) -> dict[str, Any]:
        return {
            "factors": list(self.factors),
            "rms_log_error": list(self.rms),
            "mean_log_error": list(self.bias),
            "sampling": {"factors": list(self.sampling_factors), "log_sd": list(self.sampling_sd)},
            "between_models": {"factors": list(self.between_factors), "log_sd": list(self.between_sd)},
            "level": RANGE_LEVEL,
            "method": RANGE_METHOD,
        }

    @classmethod
    def from_dict(cls, data: Mapping[str, Any] | None) -> ErrorBand | None:
        """Inverse of ``as_dict``."""
        if not data:
            return None
        sampling = data.get("sampling") or {}
        between = data.get("between_models") or {}
        return cls(
            tuple(data["factors"]),
            tuple(data["rms_log_error"]),
            tuple(data.get("mean_log_error", ())),
            tuple(sampling.get("factors", ())),
            tuple(sampling.get("log_sd", ())),
            tuple(between.get("factors", ())),
            tuple(between.get("log_sd", ())),
        )


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
        """Lower end of the nominal 90% range of E[V(n)] (E[V(n)] itself when there is no band)."""
        return self._limits(n)[0]

    def types_high(self, n: ArrayLike) -> ArrayLike:
        """Upper end of the nominal 90% range of E[V(n)] (E[V(n)] itself when there is no band)."""
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

    @property
    def title(self) -> str:
        return self.model.title

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

    @cached_property
    def degenerate(self) -> str | None:
        """Why these parameters are no result although the fit ended (``VocabularyModel.degeneracy``), or
        None. A degenerate fit predicts nothing beyond the corpus size and shows no parameters; the
        recommendation gives it no weight."""
        return self.model.degeneracy(self.params, self.tokens)

    def as_dict(self) -> dict[str, Any]:
        """The fit as JSON. ``params`` and ``arrays`` are where the fit ended, kept so that the predictor can
        be rebuilt; when ``degenerate`` holds a reason they are no result, and pages show the reason."""
        return {
            "model": self.model.name,
            "title": self.model.title,
            "params": {k: float(v) for k, v in self.params.items() if np.ndim(v) == 0},
            "arrays": {
                k: np.asarray(v, dtype=float).tolist() for k, v in self.params.items() if np.ndim(v) > 0
            },
            "tokens": self.tokens,
            "degenerate": self.degenerate,
            "goodness_of_fit": self.goodness_of_fit.as_dict(),
            "band": None if self.band is None else self.band.as_dict(),
        }


class VocabularyModel(ABC):
    """A vocabulary model: a formula for E[V(n)] and E[V_m(n)] with named parameters.

    Subclasses set ``name`` (API name), ``title`` (human name), ``parameter_names`` and ``bounds`` (the
    domain of each parameter: an open interval; the shared fit maps it to the real line), and implement
    ``expected_types``, ``expected_spectrum`` and, when they use the shared fit, ``initial_guesses``. Sizes
    ``n`` and frequencies ``m`` broadcast like NumPy arrays.
    """

    name: ClassVar[str]
    title: ClassVar[str]
    parameter_names: ClassVar[tuple[str, ...]]
    parameter_meanings: ClassVar[dict[str, str]] = {}
    formula: ClassVar[str] = ""
    finite_population: ClassVar[bool] = False
    bounds: ClassVar[dict[str, tuple[float, float]]] = {}
    edge_parameters: ClassVar[tuple[str, ...]] = ()
    """Parameters whose domain ends are limiting cases the fit can run to (an exponent at 0 or 1, a shape at
    -1 or 0): a fit ending within EDGE_SHARE of such an end is degenerate. Other ends (a probability near 0)
    are ordinary values."""
    min_tokens: ClassVar[int] = 0
    """Fewest tokens the model is fitted to (its parameters are not identified on fewer)."""
    reads_spectrum: ClassVar[bool] = True
    """False for a model fitted to the totals alone: it ignores the spectrum a corpus has, so it is shown for
    comparison but gets no weight in the recommendation (the same law fitted to the spectrum competes)."""
    warm_start: ClassVar[bool] = True
    """Whether a fit from the one start ``near`` (``fit``) lands where the fit from every initial guess does,
    within the solver's tolerance: False for a model whose cost is so flat along a ridge that different
    starts end at different parameters of near-equal cost; it is always fitted from every guess."""

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

    def degeneracy(self, params: Mapping[str, Any], tokens: int) -> str | None:
        """Why ``params`` fitted at ``tokens`` tokens are no result, or None. In order:

        1. every parameter finite and inside its open domain ``bounds``, and no edge parameter within
           EDGE_SHARE of an end of its domain (``app.core.validity.parameter_problem``);
        2. a finite population holds at least one type and at least the E[V(N)] types expected at the
           fitted size (E[V(n)] rises towards the population as n grows);
        3. the model's own impossibilities (``derived_problem``), such as a probability above 1.
        """
        problem = first_problem(
            parameter_problem(
                key, params[key], self.bounds[key], EDGE_SHARE if key in self.edge_parameters else None
            )
            for key in self.parameter_names
        )
        if problem:
            return problem
        if self.finite_population:
            with np.errstate(all="ignore"):
                population = self.population_size(params)
                expected = float(self.expected_types(float(tokens), params))
            if population is None or not math.isfinite(population) or population < 1:
                return f"its population of {population} types is not a finite number of at least one type"
            if population < expected * (1 - 1e-6):
                return (
                    f"its population of {population:,.1f} types is smaller than the {expected:,.1f} types it "
                    f"expects in {tokens:,} tokens"
                )
        return self.derived_problem(params, tokens)

    def derived_problem(self, params: Mapping[str, Any], tokens: int) -> str | None:
        """A quantity derived from the parameters that no population can have (for a model to override),
        or None."""
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
                if not np.all(np.isfinite(expected)):  # e.g. 0 * inf at extreme parameters: not scaled
                    return breakdown
                r = scale(observed - expected, expected)
            except ArithmeticError:
                return breakdown
            return r if np.all(np.isfinite(r)) else breakdown

        return residuals

    def fit(
        self, spectrum: Spectrum, m_max: int = 15, near: Mapping[str, float] | None = None
    ) -> FittedModel:
        """Fit by ``estimate`` (by default: minimise the cost of the module docstring from every initial
        guess; the lowest cost wins), or from the one start ``near`` (``_estimate_near``), and check the
        expectations for soundness."""
        if spectrum.types == 0:
            raise ValueError("cannot fit a model to an empty spectrum")
        if spectrum.types < MIN_TYPES_TO_FIT:
            raise ValueError(
                f"{self.name}: {spectrum.types} type(s) are too few to fit a model "
                f"(at least {MIN_TYPES_TO_FIT} are needed)"
            )
        if spectrum.tokens < self.min_tokens:
            raise ValueError(
                f"{self.name}: not fitted to fewer than {self.min_tokens:,} tokens ({spectrum.tokens:,} here): "
                "its parameters are not identified on so few"
            )
        params = (
            self.estimate(spectrum, m_max) if near is None else self._estimate_near(spectrum, m_max, near)
        )
        self.check_growth(params, spectrum.tokens)
        return FittedModel(self, params, spectrum.tokens, spectrum, m_max)

    def estimate(self, spectrum: Spectrum, m_max: int = 15) -> Params:
        """The parameters that ``fit`` wraps in a FittedModel: here the least-squares cost of the module
        docstring. A model fitted another way (a closed form, a linear program) overrides this hook only;
        the checks, the FittedModel and every verb stay shared."""
        return self._least_squares(spectrum, m_max, self.initial_guesses(spectrum))

    def _least_squares(self, spectrum: Spectrum, m_max: int, starts: list[Mapping[str, float]]) -> Params:
        residuals = self._residuals(spectrum, m_max, lambda d, e: d / np.sqrt(np.maximum(e, 1e-12)))
        with np.errstate(all="ignore"):  # a start on a domain's end maps to an infinite coordinate: skipped
            thetas = [theta for g in starts if np.all(np.isfinite(theta := self.to_unconstrained(g)))]
        best = _minimise(residuals, thetas)
        if best is None:
            raise ValueError(f"{self.name}: no initial guess led to a finite cost")
        return self.from_unconstrained(best)

    def _estimate_near(self, spectrum: Spectrum, m_max: int, near: Mapping[str, float]) -> Params:
        """Warm start: the least-squares fit from the one start ``near``, the parameters fitted to a spectrum
        like this one (the whole corpus, for its thinnings and bootstrap replicates), where the minimum
        found from every initial guess usually lies close by; one descent instead of one per guess. A
        model fitted another way (``estimate`` overridden) or without ``warm_start`` is fitted as always, and
        so is a spectrum on which the start leads to no finite cost."""
        if type(self).estimate is not VocabularyModel.estimate or not self.warm_start:
            return self.estimate(spectrum, m_max)
        try:
            return self._least_squares(spectrum, m_max, [near])
        except ValueError:
            return self.estimate(spectrum, m_max)

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
