"""One glossary of the trade's terms and our names; pages show these as hover definitions."""

GLOSSARY: dict[str, str] = {
    "token": "One running word of the text; a text of N tokens has N words in a row.",
    "type": "A distinct word form; 'the' occurring 500 times is one type.",
    "hapax legomena": "Types that occur exactly once (V_1).",
    "dis legomena": "Types that occur exactly twice (V_2).",
    "spectrum": "The frequency spectrum: V_m, how many types occur exactly m times.",
    "legomena profile": "V_m / V for small m: the share of types occurring once, twice, ...",
    "type growth": "Types as a function of tokens, in text order or expected for random samples.",
    "TTR": "Type/token ratio V/N. It falls as texts grow, so compare it only at equal sizes.",
    "Zipf size": "The token count at which a corpus behaves as perfectly Zipfian (perfect-Zipf model).",
    "backtest": "Fit a model on part of a corpus, predict the rest, and record the error.",
    "recommended model": "The prediction Lexigrowth trusts most for this corpus, judged by backtests.",
    "population model": "A model of the probabilities of all the types a source could produce, seen and "
    "unseen; fitted to the spectrum, it predicts the vocabulary of larger samples.",
    "goodness of fit": "Whether the model's expected spectrum differs from the observed one by more than "
    "sampling noise. With many tokens even small, harmless differences are detected.",
    "size-matched": "Every corpus interpolated (or extrapolated, marked) to one common token count.",
    "tokenization profile": "The named settings that turn text into tokens (case folding, numbers, ...).",
    "random order": "Expectation over random samples of the corpus's tokens (exact hypergeometric).",
    "text order": "What the text actually shows when read from the beginning.",
}
