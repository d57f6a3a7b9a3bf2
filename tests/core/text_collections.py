"""Test helper: a bank of simulated texts whose vocabularies cluster by topic, as a texts x words matrix.

Every text has a topic and a few names of its own: its tokens are drawn (multinomial) from a mixture of a
general Zipf-Mandelbrot vocabulary, the Zipf-Mandelbrot vocabulary of its topic (a random set of words) and
its own names, so that texts of one topic share words that other texts lack and a text repeats its names,
as real texts do. Lengths are log-normal.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

VOCABULARY = 20_000
GENERAL_WORDS = 4_000


def zipf_weights(size: int, shift: float = 2.7) -> np.ndarray:
    """p_r proportional to 1 / (r + shift), r = 1..size."""
    weights = 1 / (np.arange(1, size + 1) + shift)
    return weights / weights.sum()


def topic_texts(
    rng: np.random.Generator,
    texts: int,
    topics: int = 8,
    topic_words: int = 400,
    median_length: float = 400,
    topic_share: float = 0.4,
    name_share: float = 0.05,
    topic_of: np.ndarray | None = None,
) -> sp.csr_array:
    """``texts`` texts (rows) over ``VOCABULARY`` words (columns); ``topic_of`` fixes each text's topic
    (default: uniform at random). Topic vocabularies are drawn from the words after the general ones."""
    general = np.zeros(VOCABULARY)
    general[:GENERAL_WORDS] = zipf_weights(GENERAL_WORDS)
    topic_vocabularies = [
        rng.choice(np.arange(GENERAL_WORDS, VOCABULARY), topic_words, replace=False) for _ in range(topics)
    ]
    if topic_of is None:
        topic_of = rng.integers(0, topics, texts)
    lengths = np.maximum(50, np.round(rng.lognormal(np.log(median_length), 0.5, texts))).astype(int)
    rows = []
    for topic, length in zip(topic_of, lengths, strict=True):
        p = (1 - topic_share - name_share) * general
        p[topic_vocabularies[topic]] += topic_share * zipf_weights(topic_words)
        p[rng.choice(np.arange(GENERAL_WORDS, VOCABULARY), 5, replace=False)] += name_share / 5
        rows.append(rng.multinomial(length, p / p.sum()))
    return sp.csr_array(np.array(rows))
