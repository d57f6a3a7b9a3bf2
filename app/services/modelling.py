"""Modelling service: spectra from the store in, cached numbers out (the maths lives in app.core)."""

from __future__ import annotations

import numpy as np
from sqlalchemy.engine import Engine

from app.config import PROGRAM_VERSION
from app.core.interpolation import growth_band
from app.core.spectrum import Spectrum
from app.store import corpora as store

RANDOM_GROWTH_POINTS = 60


def load_spectrum(engine: Engine, corpus_id: int) -> Spectrum:
    store.get_corpus(engine, corpus_id)
    return Spectrum.from_pairs(store.spectrum_pairs(engine, corpus_id))


def cached(engine: Engine, corpus_id: int, kind: str, compute) -> dict:
    """Return the cached result of ``kind`` for this program version, computing and storing it if absent."""
    payload = store.cached_result(engine, corpus_id, kind, PROGRAM_VERSION)
    if payload is None:
        payload = compute()
        store.store_cached_result(engine, corpus_id, kind, PROGRAM_VERSION, payload)
    return payload


def growth_sizes(tokens: int, points: int) -> np.ndarray:
    """Sizes for curves: log-spaced and linear-spaced points between 1 and ``tokens``."""
    if tokens < 1:
        return np.array([], dtype=np.int64)
    half = max(points // 2, 2)
    sizes = np.concatenate([np.geomspace(1, tokens, half), np.linspace(1, tokens, half)])
    return np.unique(np.clip(np.rint(sizes), 1, tokens).astype(np.int64))


def random_order_growth(engine: Engine, corpus_id: int) -> dict:
    """Expected type growth of random samples with its 95% band (exact hypergeometric), cached."""

    def compute() -> dict:
        spectrum = load_spectrum(engine, corpus_id)
        bands = growth_band(spectrum, growth_sizes(spectrum.tokens, RANDOM_GROWTH_POINTS))
        return {
            "method": "exact hypergeometric expectation over random samples without replacement; "
            "band = expectation +- 1.96 exact standard deviations",
            "points": [
                {"tokens": b.tokens, "types": b.types, "sd": b.sd, "low": b.low, "high": b.high}
                for b in bands
            ],
        }

    return cached(engine, corpus_id, "random_order_growth", compute)
