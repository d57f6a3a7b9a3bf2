"""Checks of the synthetic demo corpora: reproducible, of the promised sizes, and different by design.

Expected vocabulary sizes use the exact random-sample (hypergeometric) expectation of the frequency spectrum,
E[V_m(n)] = sum_f V_f(N) * P(X = m), X ~ Hypergeometric(N tokens, f copies, n draws)
(Baayen 2001, Word Frequency Distributions, ch. 2, from memory), computed with scipy.stats.hypergeom.
"""

from __future__ import annotations

import json
import re
import subprocess
import sys
from collections import Counter
from functools import cache
from itertools import combinations
from pathlib import Path

import numpy as np
import pytest
from lexicalrichness import LexicalRichness
from scipy.stats import hypergeom

DEMO = Path(__file__).resolve().parents[1] / "demo_corpora"
LETTER_RUN = re.compile(r"[^\W\d_]+")
COMMON_SIZE = 20_000  # every corpus has at least this many tokens, so all can be compared here


@cache
def manifest() -> dict:
    return json.loads((DEMO / "manifest.json").read_text(encoding="utf-8"))


def corpora() -> list[dict]:
    return manifest()["corpora"]


@cache
def text(file: str) -> str:
    return (DEMO / file).read_text(encoding="utf-8")


@cache
def tokens(file: str) -> tuple[str, ...]:
    return tuple(LETTER_RUN.findall(text(file).lower()))


@cache
def frequencies(file: str) -> np.ndarray:
    return np.array(list(Counter(tokens(file)).values()), dtype=np.int64)


def expected_legomena(file: str, n: int, m: int) -> float:
    """E[V_m(n)]: expected number of types seen exactly m times in a random sample of n tokens."""
    f, v_f = np.unique(frequencies(file), return_counts=True)
    return float(np.sum(v_f * hypergeom.pmf(m, len(tokens(file)), f, n)))


def expected_types(file: str, n: int) -> float:
    """E[V(n)] = sum_f V_f(N) * (1 - P(X = 0)): types seen at least once in a random sample of n tokens."""
    return float(frequencies(file).size - expected_legomena(file, n, 0))


def param(entry: dict, key: str) -> float:
    return entry["generator"][key]


def comparable_pairs(same: str) -> list[tuple[dict, dict]]:
    """Pairs of corpora sharing an author or a register, the designed richer one (smaller exponent) first."""
    pairs = []
    for a, b in combinations(corpora(), 2):
        if a["labels"][same] == b["labels"][same]:
            pairs.append((a, b) if param(a, "exponent") < param(b, "exponent") else (b, a))
    return pairs


def test_generator_rewrites_the_committed_files_byte_for_byte(tmp_path: Path) -> None:
    subprocess.run(
        [sys.executable, str(DEMO / "generate.py"), "--out", str(tmp_path)],
        check=True,
        capture_output=True,
        timeout=120,
    )
    committed = sorted(p.name for p in DEMO.glob("*.txt")) + ["manifest.json"]
    generated = sorted(p.name for p in tmp_path.glob("*.txt")) + ["manifest.json"]
    assert generated == committed
    for name in committed:
        assert (tmp_path / name).read_bytes() == (DEMO / name).read_bytes(), name


def test_manifest_labels_every_committed_corpus() -> None:
    entries = corpora()
    assert len(entries) >= 5
    assert sorted(e["file"] for e in entries) == sorted(p.name for p in DEMO.glob("*.txt"))
    assert len({e["name"] for e in entries}) == len(entries)
    for e in entries:
        labels = e["labels"]
        assert labels["language"] == "synthetic"
        assert labels["author"] and labels["register"] and labels["note"]
        assert param(e, "exponent") > 0 and param(e, "lexicon_size") > 0
        assert e["tokens"] == len(tokens(e["file"]))
        assert e["types"] == len(set(tokens(e["file"])))


def test_every_corpus_has_between_20_000_and_200_000_tokens_and_all_fit_in_3_mb() -> None:
    for e in corpora():
        assert 20_000 <= len(tokens(e["file"])) <= 200_000, e["file"]
    assert sum((DEMO / e["file"]).stat().st_size for e in corpora()) < 3_000_000


def test_letter_run_counts_agree_with_lexicalrichness() -> None:
    # Reference tokenizer: lexicalrichness (lower-cases, strips punctuation and digits, splits on whitespace).
    for e in corpora():
        reference = LexicalRichness(text(e["file"]))
        assert (reference.words, reference.terms) == (e["tokens"], e["types"]), e["file"]


def test_readme_table_reports_the_measured_token_and_type_counts() -> None:
    lines = (DEMO / "README.md").read_text(encoding="utf-8").splitlines()
    header = next(line for line in lines if line.startswith("| File"))
    columns = [c.strip() for c in header.strip("|").split("|")]
    rows = {}
    for line in lines:
        cells = [c.strip() for c in line.strip("|").split("|")]
        if line.startswith("| `"):
            rows[cells[0].strip("`")] = dict(zip(columns, cells, strict=True))
    assert sorted(rows) == sorted(e["file"] for e in corpora())
    for e in corpora():
        row = rows[e["file"]]
        assert int(row["Tokens"].replace(",", "")) == len(tokens(e["file"]))
        assert int(row["Types"].replace(",", "")) == len(set(tokens(e["file"])))
        assert float(row["Exponent a"]) == pytest.approx(param(e, "exponent"))
        assert int(row["Lexicon size S"].replace(",", "")) == param(e, "lexicon_size")


def test_designed_richer_corpus_has_more_types_at_a_common_size() -> None:
    pairs = comparable_pairs("author") + comparable_pairs("register")
    assert len(pairs) >= 4
    for richer, poorer in pairs:
        assert expected_types(richer["file"], COMMON_SIZE) > expected_types(poorer["file"], COMMON_SIZE), (
            richer["file"],
            poorer["file"],
        )


def test_richness_gap_between_writers_is_visible() -> None:
    # Design goal: in each register the richest writer has at least 1.5 times the poorest one's types.
    for register in {e["labels"]["register"] for e in corpora()}:
        group = sorted(
            (e for e in corpora() if e["labels"]["register"] == register), key=lambda e: param(e, "exponent")
        )
        if len(group) > 1:
            ratio = expected_types(group[0]["file"], COMMON_SIZE) / expected_types(
                group[-1]["file"], COMMON_SIZE
            )
            assert ratio >= 1.5, (register, ratio)


def test_designed_richer_author_has_a_larger_hapax_share_in_the_same_register() -> None:
    for richer, poorer in comparable_pairs("register"):
        shares = [
            expected_legomena(e["file"], COMMON_SIZE, 1) / expected_types(e["file"], COMMON_SIZE)
            for e in (richer, poorer)
        ]
        assert shares[0] > shares[1], (richer["file"], poorer["file"], shares)


def test_random_subsamples_agree_with_the_expected_type_count() -> None:
    # Independent check of the formula above: the mean type count of random subsamples (without replacement).
    rng = np.random.default_rng(7)
    for e in corpora():
        _, ids = np.unique(np.array(tokens(e["file"])), return_inverse=True)
        counts = [np.unique(rng.choice(ids, COMMON_SIZE, replace=False)).size for _ in range(4)]
        assert np.mean(counts) == pytest.approx(expected_types(e["file"], COMMON_SIZE), rel=0.01), e["file"]


def test_mtld_from_lexicalrichness_ranks_writers_as_designed() -> None:
    # MTLD (McCarthy & Jarvis 2010), a length-robust index; lexicalrichness, its default threshold 0.72.
    mtld = {e["file"]: LexicalRichness(text(e["file"])).mtld(threshold=0.72) for e in corpora()}
    for richer, poorer in comparable_pairs("register"):
        assert mtld[richer["file"]] > mtld[poorer["file"]], (richer["file"], poorer["file"])


def test_only_the_cached_register_is_bursty() -> None:
    # Topical clustering keeps the text-order type count at half the text below the random-order
    # expectation (Baayen 2001, ch. 5, from memory); words drawn independently stay close to it.
    for e in corpora():
        half = len(tokens(e["file"])) // 2
        observed = len(set(tokens(e["file"])[:half]))
        deviation = observed / expected_types(e["file"], half) - 1.0
        if param(e, "cache_share") > 0:
            assert deviation < -0.05, (e["file"], deviation)
        else:
            assert abs(deviation) < 0.03, (e["file"], deviation)
    assert any(param(e, "cache_share") > 0 for e in corpora())


def test_text_reads_like_prose() -> None:
    for e in corpora():
        body = text(e["file"])
        assert max(len(line) for line in body.splitlines()) <= 76
        assert "\n\n" in body
        sentences = [s for s in re.split(r"(?<=[.?!])\s+", body) if s.endswith((".", "?", "!"))]
        assert all(s.lstrip("*-\n ")[0].isupper() for s in sentences)
        lengths = np.array([len(LETTER_RUN.findall(s)) for s in sentences])
        assert 5 <= lengths.mean() <= 30
        assert lengths.std() / lengths.mean() >= 0.3  # sentences of variable length
        assert {".", "?", "!", ","} <= set(body)
