"""How evenly each word is spread over the texts of a corpus, vectorised over a texts x words count matrix.

With T texts of t_i tokens (corpus size N = sum t_i, text shares s_i = t_i / N) and a word occurring x_i
times in text i (f = sum x_i times in all):

- Range: the number of texts the word occurs in, #{i : x_i > 0}.
- Gries' DP (Gries 2008, "Dispersions and adjusted frequencies in corpora"): the word's share of its
  occurrences in each text, v_i = x_i / f, against the text's share of the corpus,
      DP = 1/2 sum_i |v_i - s_i|,
  0 for a word spread exactly in proportion to the texts' sizes, approaching 1 for a word in one text.
- DP_norm (Lijffijt & Gries 2012, correction to Gries 2008): DP / (1 - min_i s_i), which reaches 1 for a
  word found only in the smallest text.
- Juilland's D (Juilland & Chang-Rodríguez 1964): D = 1 - V / sqrt(T - 1), V = sd / mean the coefficient of
  variation of the word's frequencies over the T parts (standard deviation with T in the denominator);
  1 for a perfectly even word, 0 for a word in one part. The original is defined on parts of equal size;
  texts differ in size, so the frequencies are taken per token, r_i = x_i / t_i, as is common practice
  (Gries 2008 computes D so for parts of unequal size); on texts of equal size this is the original.

Only the non-zero cells are touched: sum_i |v_i - s_i| = sum_{x_i > 0} (|v_i - s_i| - s_i) + 1, and the
mean and variance of r_i come from sum r_i and sum r_i^2 over the non-zero cells.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from app.core.text_tests import as_text_matrix


@dataclass(frozen=True)
class Dispersion:
    """Per word (column order): ``frequency`` in the whole corpus, ``texts_with_word`` (range) out of
    ``texts``, Gries' ``dp``, ``dp_norm`` and Juilland's ``juilland_d``; nan for a word that never occurs."""

    texts: int
    frequency: np.ndarray
    texts_with_word: np.ndarray
    dp: np.ndarray
    dp_norm: np.ndarray
    juilland_d: np.ndarray


def dispersion(counts: sp.spmatrix | sp.sparray | np.ndarray) -> Dispersion:
    """Range, DP, DP_norm and Juilland's D of every word (see the module docstring for the formulas);
    ``counts`` is texts x words, at least two texts of at least one token each."""
    matrix = sp.csc_array(as_text_matrix(counts))
    texts = matrix.shape[0]
    if texts < 2:
        raise ValueError("dispersion needs at least two texts")
    lengths = matrix.sum(axis=1).astype(float)
    shares = lengths / lengths.sum()
    frequency = matrix.sum(axis=0)
    texts_with_word = np.diff(matrix.indptr)
    word = np.repeat(np.arange(matrix.shape[1]), texts_with_word)  # the column of every non-zero cell
    text = matrix.indices
    x = matrix.data.astype(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        v = x / frequency[word]
        deviations = np.bincount(word, np.abs(v - shares[text]) - shares[text], minlength=matrix.shape[1])
        dp = np.where(frequency > 0, (deviations + 1) / 2, np.nan)
        dp_norm = dp / (1 - shares.min())
        rates = x / lengths[text]
        mean = np.bincount(word, rates, minlength=matrix.shape[1]) / texts
        variance = np.maximum(np.bincount(word, rates**2, minlength=matrix.shape[1]) / texts - mean**2, 0.0)
        juilland_d = 1 - np.sqrt(variance) / mean / np.sqrt(texts - 1)
    return Dispersion(texts, frequency, texts_with_word, dp, dp_norm, juilland_d)
