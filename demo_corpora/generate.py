"""Generate the synthetic demo corpora of Lexigrowth.

Scenario (fictional): the archive of Skerrow Point, an invented tidal research station on the invented
island of Aunholm, and of the nearby fishing village of Tarrin Quay. Three invented writers appear in it:
Senna Kestrowe (tide observer, wide vocabulary), Berrik Olvane (lamp keeper, plain vocabulary) and
Ysolde Marrowby (columnist of the village weekly). They write field notes, letters and newspaper columns
in an invented language made of pronounceable pseudo-words.

How a corpus is drawn:
- every token is a function word (probability ``function_share``) or a content word;
- function words come from one shared core of 150 invented words with the Zipf-Mandelbrot law
  p(r) proportional to (r + b)^(-a) (Mandelbrot 1953; Baayen 2001, ch. 3);
- content words follow a Zipf-Mandelbrot law of the corpus' own exponent ``a``, offset ``b`` and lexicon size
  ``S`` over a rank order that is the shared order of commonness, perturbed per author and per register, so
  that authors share most of their words yet each has distinctive ones;
- for the newspaper columns a content word is, with probability ``cache_share``, a repeat of one of the last
  ``cache_window`` content words of the same column (a cache model in the manner of Kuhn & De Mori 1990),
  which makes words bursty: they cluster in the column that is about them.
Shorter pseudo-words are made more common, as in real vocabularies (Zipf's law of abbreviation).

All randomness comes from numpy's PCG64 generator with fixed integer keys and is used only through
``Generator.random`` (uniform doubles, the simplest and most stable part of numpy's streams); normal
deviates are made from it by the Box-Muller transform. Running ``python demo_corpora/generate.py`` rewrites
the ``.txt`` files and ``manifest.json`` byte for byte; ``--out DIR`` writes them elsewhere.
"""

from __future__ import annotations

import argparse
import json
import re
import textwrap
from collections import Counter
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
LINE_WIDTH = 76
LEXICON_KEY = 20240611
FUNCTION_WORD_COUNT = 150
FUNCTION_LAW = (1.0, 1.5)  # (a, b) of the shared function-word law
COMMON_LEXICON_SIZE = 60_000
AUTHOR_SPREAD = 0.6  # standard deviation of the per-author perturbation of log commonness
REGISTER_SPREAD = 0.4  # standard deviation of the per-register perturbation of log commonness

SCENARIO = (
    "The archive of Skerrow Point, a fictional tidal research station on the fictional island of Aunholm, "
    "and of the nearby fishing village of Tarrin Quay. Three invented writers, field notes, letters and "
    "newspaper columns, all in an invented language of pseudo-words."
)

# Syllable inventory of content words: every syllable has an onset, the last one a coda.
ONSETS = "b d f h k l m n p r s t v w br dr fl fr kl kr pl sk st th tr sh hw sv".split()
NUCLEI = "a e o u ai ei ou ae ia y aa oe".split()
FINAL_CODAS = "n r l m s th nd ld sk rl ns".split()
MEDIAL_CODAS = "n r l m s".split()
# Syllables of the function words: short, open or lightly closed.
FUNCTION_ONSETS = ["", "b", "d", "h", "k", "l", "m", "n", "s", "t", "v", "w", "th"]
FUNCTION_NUCLEI = "a e i o u ai ei ou".split()
FUNCTION_CODAS = ["", "", "n", "s", "r", "l", "m"]

AUTHORS = {
    "kestrowe": {"name": "Senna Kestrowe", "key": 101, "first": "Senna"},
    "olvane": {"name": "Berrik Olvane", "key": 202, "first": "Berrik"},
    "marrowby": {"name": "Ysolde Marrowby", "key": 303, "first": "Ysolde"},
}
REGISTERS = {"field notes": 11, "letters": 22, "newspaper columns": 33}
CORRESPONDENTS = ("Idrelle", "Tamsel", "Orvo", "Wenna", "Darrow", "Pellan")
GREETING = "Ammel"
CLOSING = "Hailen vor"
SECTION_BREAK = "* * *"
LABEL_FIELDS = ("file", "name", "author", "register", "note")  # CorpusSpec fields that are not parameters


@dataclass(frozen=True)
class CorpusSpec:
    """Everything that determines one corpus; written to the manifest as its generator parameters."""

    file: str
    name: str
    author: str
    register: str
    note: str
    exponent: float  # a of the content-word law p(r) ~ (r + b)^(-a)
    offset: float  # b of the content-word law
    lexicon_size: int  # S, number of content words the writer can use in this register
    function_share: float  # probability that a token is a function word
    sentence_mean: float  # mean sentence length in tokens
    target_tokens: int  # generation stops at the first document end at or beyond this many tokens
    random_state: int
    cache_share: float = 0.0
    cache_window: int = 0


CORPORA = (
    CorpusSpec(
        "kestrowe_field_notes.txt",
        "Kestrowe: field notes",
        "kestrowe",
        "field notes",
        "Tide-book entries of the station's observer; the designed richest vocabulary.",
        1.00,
        2.5,
        48_000,
        0.36,
        10.0,
        110_000,
        5101,
    ),
    CorpusSpec(
        "kestrowe_letters.txt",
        "Kestrowe: letters",
        "kestrowe",
        "letters",
        "Letters from the station to friends on the mainland.",
        1.05,
        2.5,
        30_000,
        0.50,
        17.0,
        45_000,
        5102,
    ),
    CorpusSpec(
        "olvane_field_notes.txt",
        "Olvane: field notes",
        "olvane",
        "field notes",
        "Lamp-room log of the keeper; the designed poorest vocabulary.",
        1.30,
        2.5,
        7_000,
        0.38,
        9.0,
        80_000,
        5201,
    ),
    CorpusSpec(
        "olvane_letters.txt",
        "Olvane: letters",
        "olvane",
        "letters",
        "The keeper's letters home; plain and repetitive.",
        1.35,
        2.5,
        5_000,
        0.52,
        14.0,
        30_000,
        5202,
    ),
    CorpusSpec(
        "marrowby_columns.txt",
        "Marrowby: newspaper columns",
        "marrowby",
        "newspaper columns",
        "Weekly columns of the Tarrin Quay paper; bursty: words cluster in the column about them.",
        1.12,
        2.5,
        22_000,
        0.47,
        20.0,
        75_000,
        5301,
        cache_share=0.30,
        cache_window=60,
    ),
    CorpusSpec(
        "marrowby_letters.txt",
        "Marrowby: letters",
        "marrowby",
        "letters",
        "The columnist's letters to her editor and friends.",
        1.15,
        2.5,
        16_000,
        0.50,
        16.0,
        25_000,
        5302,
    ),
)

# Register styles: sentences per paragraph (low, high), paragraphs per document (low, high),
# comma rate after a content word, and the probabilities of '.', '?', '!' ending a sentence.
STYLES = {
    "field notes": {"sentences": (2, 7), "paragraphs": (1, 3), "comma": 0.05, "ends": (0.93, 0.05, 0.02)},
    "letters": {"sentences": (2, 6), "paragraphs": (2, 5), "comma": 0.09, "ends": (0.80, 0.12, 0.08)},
    "newspaper columns": {
        "sentences": (3, 6),
        "paragraphs": (4, 8),
        "comma": 0.10,
        "ends": (0.90, 0.07, 0.03),
    },
}


class Draws:
    """Random draws built only on uniform doubles from a fixed-key PCG64 generator."""

    def __init__(self, key: int) -> None:
        self._rng = np.random.default_rng(key)

    def uniform(self, n: int | None = None) -> np.ndarray | float:
        """U(0, 1) doubles (one float when ``n`` is None)."""
        return self._rng.random() if n is None else self._rng.random(n)

    def normal(self, n: int) -> np.ndarray:
        """Standard normal deviates by the Box-Muller transform (Box & Muller 1958)."""
        u1 = 1.0 - self._rng.random(n)  # in (0, 1], so the logarithm is finite
        u2 = self._rng.random(n)
        return np.sqrt(-2.0 * np.log(u1)) * np.cos(2.0 * np.pi * u2)

    def integer(self, low: int, high: int) -> int:
        """A uniform integer in [low, high] inclusive."""
        return low + int(self._rng.random() * (high - low + 1))

    def from_cdf(self, cdf: np.ndarray, n: int | None = None) -> np.ndarray | int:
        """Indices drawn by inversion of an increasing, unnormalised cumulative distribution."""
        u = self.uniform(n) * cdf[-1]
        return np.searchsorted(cdf, u, side="right")


def zipf_mandelbrot_cdf(size: int, exponent: float, offset: float) -> np.ndarray:
    """Unnormalised cumulative weights of p(r) ~ (r + b)^(-a), r = 1..S (Mandelbrot 1953)."""
    ranks = np.arange(1, size + 1, dtype=np.float64)
    return np.cumsum((ranks + offset) ** (-exponent))


def build_function_words(draws: Draws) -> list[str]:
    """150 short invented function words, the shortest first (they get the highest ranks)."""
    words: dict[str, None] = {}
    while len(words) < FUNCTION_WORD_COUNT:
        syllables = 1 if draws.uniform() < 0.8 else 2
        word = ""
        for _ in range(syllables):
            onset = FUNCTION_ONSETS[int(draws.uniform() * len(FUNCTION_ONSETS))]
            nucleus = FUNCTION_NUCLEI[int(draws.uniform() * len(FUNCTION_NUCLEI))]
            coda = FUNCTION_CODAS[int(draws.uniform() * len(FUNCTION_CODAS))]
            word += onset + nucleus + coda
        words.setdefault(word)
    return sorted(words, key=len)


def build_content_words(draws: Draws, size: int, taken: set[str]) -> list[str]:
    """``size`` distinct pseudo-words in order of commonness: shorter words tend to come first."""
    shares = np.cumsum([0.08, 0.42, 0.36, 0.14])  # 1 to 4 syllables
    words: dict[str, None] = {}
    while len(words) < size:
        batch = size - len(words)
        n_syll = draws.from_cdf(shares, batch) + 1
        total = int(n_syll.sum())
        onset, nucleus, medial, coda = (draws.uniform(total) for _ in range(4))
        pos = 0
        for k in n_syll:
            word = ""
            for j in range(int(k)):
                i = pos + j
                word += ONSETS[int(onset[i] * len(ONSETS))] + NUCLEI[int(nucleus[i] * len(NUCLEI))]
                if j == k - 1:
                    word += FINAL_CODAS[int(coda[i] * len(FINAL_CODAS))]
                elif medial[i] < 0.3:
                    word += MEDIAL_CODAS[int(coda[i] * len(MEDIAL_CODAS))]
            pos += int(k)
            if word not in taken:
                words.setdefault(word)
    ordered = list(words)
    keys = np.array([len(w) for w in ordered], dtype=np.float64) + 1.5 * draws.normal(len(ordered))
    return [ordered[i] for i in np.argsort(keys, kind="stable")]


def corpus_rank_order(spec: CorpusSpec) -> np.ndarray:
    """Indices into the common lexicon, in this corpus' rank order, truncated to ``lexicon_size``.

    key(w) = log(1 + commonness index of w) + sd_author * z_author(w) + sd_register * z_register(w):
    one author keeps their preferences across registers, one register keeps its topics across authors.
    """
    base = np.log1p(np.arange(COMMON_LEXICON_SIZE, dtype=np.float64))
    z_author = Draws(AUTHORS[spec.author]["key"]).normal(COMMON_LEXICON_SIZE)
    z_register = Draws(REGISTERS[spec.register]).normal(COMMON_LEXICON_SIZE)
    key = base + AUTHOR_SPREAD * z_author + REGISTER_SPREAD * z_register
    return np.argsort(key, kind="stable")[: spec.lexicon_size]


class Writer:
    """Draws the sentences, paragraphs and documents of one corpus."""

    def __init__(self, spec: CorpusSpec, content: list[str], function_words: list[str]) -> None:
        self.spec = spec
        self.style = STYLES[spec.register]
        self.draws = Draws(spec.random_state)
        order = corpus_rank_order(spec)
        self.content = [content[i] for i in order]
        self.function_words = function_words
        self.content_cdf = zipf_mandelbrot_cdf(spec.lexicon_size, spec.exponent, spec.offset)
        self.probs = np.diff(self.content_cdf, prepend=0.0) / self.content_cdf[-1]
        self.function_cdf = zipf_mandelbrot_cdf(len(function_words), *FUNCTION_LAW)
        self.ends_cdf = np.cumsum(self.style["ends"])
        self.recent: list[int] = []  # content words of the current document, for the cache
        self.tokens = 0

    def content_word(self) -> str:
        """A content word: a cache repeat (bursty registers only) or a fresh draw from the law."""
        spec = self.spec
        if self.recent and spec.cache_share > 0 and self.draws.uniform() < spec.cache_share:
            window = self.recent[-spec.cache_window :]
            index = window[int(self.draws.uniform() * len(window))]
        else:
            index = int(self.draws.from_cdf(self.content_cdf))
        self.recent.append(index)
        return self.content[index]

    def topical_words(self, k: int) -> list[int]:
        """The ``k`` content words of the current document most in excess of their expected count."""
        counts = Counter(self.recent)
        used = np.array(list(counts), dtype=np.int64)
        excess = np.array(list(counts.values())) - self.probs[used] * len(self.recent)
        return [int(used[i]) for i in np.argsort(-excess, kind="stable")[:k]]

    def sentence(self) -> str:
        """A sentence of gamma-like random length (shape 3), capitalised, with commas and an end mark."""
        length = max(2, round(self.spec.sentence_mean * -np.log((1.0 - self.draws.uniform(3)).prod()) / 3.0))
        kinds = self.draws.uniform(length) < self.spec.function_share
        kinds[-1] = False  # sentences end on a content word
        words = []
        for i, is_function in enumerate(kinds):
            if is_function:
                word = self.function_words[int(self.draws.from_cdf(self.function_cdf))]
            else:
                word = self.content_word()
                if i < length - 1 and self.draws.uniform() < self.style["comma"]:
                    word += ","
            words.append(word)
        self.tokens += length
        words[0] = words[0][0].upper() + words[0][1:]
        return " ".join(words) + ".?!"[int(self.draws.from_cdf(self.ends_cdf))]

    def paragraph(self) -> str:
        low, high = self.style["sentences"]
        text = " ".join(self.sentence() for _ in range(self.draws.integer(low, high)))
        return textwrap.fill(text, LINE_WIDTH, break_long_words=False, break_on_hyphens=False)

    def body(self) -> list[str]:
        low, high = self.style["paragraphs"]
        return [self.paragraph() for _ in range(self.draws.integer(low, high))]

    def document(self) -> str:
        """One field-notes entry, letter or column."""
        self.recent = []
        register = self.spec.register
        if register == "field notes":
            return "\n\n".join(self.body())
        if register == "letters":
            who = CORRESPONDENTS[int(self.draws.uniform() * len(CORRESPONDENTS))]
            signature = AUTHORS[self.spec.author]["first"]
            self.tokens += 5  # greeting, correspondent, two closing words, signature
            return "\n\n".join([f"{GREETING} {who},", *self.body(), f"{CLOSING},\n{signature}"])
        paragraphs = self.body()
        title_words = self.topical_words(self.draws.integer(3, 6))
        title = " ".join(self.content[i].capitalize() for i in title_words)
        self.tokens += len(title_words) + len(AUTHORS[self.spec.author]["name"].split())
        return "\n\n".join([title, *paragraphs, f"-- {AUTHORS[self.spec.author]['name']}"])

    def text(self) -> str:
        """Documents until the target size is reached, separated by a section-break line."""
        documents = []
        while self.tokens < self.spec.target_tokens:
            documents.append(self.document())
        return f"\n\n{SECTION_BREAK}\n\n".join(documents) + "\n"


def count_tokens(text: str) -> tuple[int, int]:
    """(tokens, types) of a text, a token being a run of letters, compared in lower case."""
    words = re.findall(r"[^\W\d_]+", text.lower())
    return len(words), len(set(words))


def generate(out: Path) -> list[dict]:
    """Write every corpus and ``manifest.json`` into ``out``; return the manifest entries."""
    out.mkdir(parents=True, exist_ok=True)
    draws = Draws(LEXICON_KEY)
    function_words = build_function_words(draws)
    reserved = {w.lower() for w in [*function_words, *CORRESPONDENTS, GREETING, *CLOSING.split()]}
    reserved |= {part.lower() for a in AUTHORS.values() for part in a["name"].split()}
    content = build_content_words(draws, COMMON_LEXICON_SIZE, reserved)
    entries = []
    for spec in CORPORA:
        text = Writer(spec, content, function_words).text()
        (out / spec.file).write_bytes(text.encode("utf-8"))
        tokens, types = count_tokens(text)
        params = {k: v for k, v in asdict(spec).items() if k not in LABEL_FIELDS}
        params.update(
            law="power_law",
            function_words=len(function_words),
            function_exponent=FUNCTION_LAW[0],
            function_offset=FUNCTION_LAW[1],
        )
        entries.append(
            {
                "file": spec.file,
                "name": spec.name,
                "labels": {
                    "author": AUTHORS[spec.author]["name"],
                    "register": spec.register,
                    "language": "synthetic",
                    "note": spec.note,
                },
                "generator": params,
                "tokens": tokens,
                "types": types,
            }
        )
    manifest = {
        "scenario": SCENARIO,
        "generator": "generate.py",
        "token_rule": "runs of letters, lower-cased",
        "corpora": entries,
    }
    (out / "manifest.json").write_bytes((json.dumps(manifest, indent=2) + "\n").encode("utf-8"))
    return entries


def main() -> None:
    parser = argparse.ArgumentParser(description="Write the synthetic demo corpora and their manifest.")
    parser.add_argument("--out", type=Path, default=HERE, help="output folder (default: this folder)")
    args = parser.parse_args()
    for entry in generate(args.out):
        g = entry["generator"]
        print(
            f"| `{entry['file']}` | {entry['labels']['author']} | {entry['labels']['register']} | "
            f"{g['exponent']:.2f} | {g['lexicon_size']:,} | {g['function_share']:.2f} | "
            f"{g['cache_share']:.2f} | {entry['tokens']:,} | {entry['types']:,} |"
        )


if __name__ == "__main__":
    main()
