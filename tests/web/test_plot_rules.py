"""Rules every plot follows: one colour and one dash pattern per model (no two models alike, none drawn like
the text or the random-order curve), axis ranges chosen from what a plot must show (the model curves and the
planning answer, not a band's upper edge), and a comparison that stays readable for small corpora."""

from __future__ import annotations

from app.services import modelling
from app.web import figures
from app.web.compare_figures import growth_figure


def test_every_model_has_a_colour_and_dash_pattern_of_its_own():
    names = [*modelling.MODELS, modelling.RECOMMENDED]
    styles = {name: figures.model_style(name) for name in names}
    assert len({(s.colour, s.dash) for s in styles.values()}) == len(names)
    dashes = [styles[name].dash for name in modelling.MODELS]
    assert len(set(dashes)) == len(dashes)  # told apart by the line alone, without colour
    assert not {"solid", "dot", "dash"} & set(dashes)  # the text, the random order, the recommended model
    colours = [styles[name].colour for name in modelling.MODELS]
    assert len(set(colours)) == len(colours)


def _growth(marker=None, horizon_factor=10):
    n = 10_000
    text_order = [(k, int(40 * k**0.6)) for k in range(100, n + 1, 100)]
    random_order = [
        {"tokens": k, "types": 40 * k**0.6, "low": 38 * k**0.6, "high": 42 * k**0.6} for k, _ in text_order
    ]
    xs = [n * (1 + i) for i in range(horizon_factor)]
    models = {"heaps": (xs, [40 * x**0.6 for x in xs]), "recommended": (xs, [40 * x**0.6 for x in xs])}
    band = (xs, [40 * x**0.6 for x in xs], [40 * x**0.6 * 50 for x in xs])  # a band far above every curve
    return figures.growth_lines(text_order, random_order, models, band, n, marker), n, xs, models


def test_growth_plot_ranges_come_from_the_curves_and_the_planning_answer():
    fig, n, xs, models = _growth()
    views = fig["layout"]["meta"]["views"]
    assert fig["layout"]["meta"]["default_view"] == "observed"
    top = max(max(ys) for _, ys in models.values())
    assert views["extrapolated"]["yaxis.range"][1] < 1.1 * top  # not stretched by the band
    assert views["extrapolated"]["xaxis.range"][1] == max(xs)
    # a planning answer beyond the text: the plot opens on the extrapolation, the answer inside its range
    answer = 3.5 * n
    fig, *_ = _growth(marker=(answer, "target reached"))
    layout = fig["layout"]
    assert layout["meta"]["default_view"] == "extrapolated"
    low, high = layout["xaxis"]["range"]
    assert (
        low < answer < high
        and layout["xaxis"]["range"] == layout["meta"]["views"]["extrapolated"]["xaxis.range"]
    )
    # an answer within the text: the text's own size, where it lies
    fig, *_ = _growth(marker=(0.5 * n, "target reached"))
    assert fig["layout"]["meta"]["default_view"] == "observed"


def _snapshot(sizes: dict[int, int], spectrum_only: set[int] = frozenset()) -> dict:
    corpora = [
        {"id": cid, "name": f"corpus {cid}", "tokens": n, "colour_index": i}
        for i, (cid, n) in enumerate(sizes.items())
    ]
    growth = []
    for cid, n in sizes.items():
        ks = [max(1, round(n * f)) for f in (0.01, 0.1, 0.5, 1.0)]
        curve = {"tokens": ks, "types": [k**0.7 for k in ks]}
        growth.append(
            {
                "corpus_id": cid,
                "random_order": curve | {"low": curve["types"], "high": curve["types"]},
                "model": None,
                "text_order": {"tokens": [], "types": []} if cid in spectrum_only else curve,
            }
        )
    return {
        "corpora": corpora,
        "growth": growth,
        "settings": {"horizon": 2 * max(sizes.values())},
        "size_matched": {"tokens": min(sizes.values())},
    }


def test_comparison_growth_plot_reads_small_corpora_and_lists_every_corpus_in_its_legend():
    fig = growth_figure(_snapshot({1: 37, 2: 120_000}, spectrum_only={2}))
    # a log token axis (37 against 120,000 tokens) goes with a log types axis: 37 tokens are not flat at 0
    assert fig["layout"]["xaxis"]["type"] == "log" and fig["layout"]["yaxis"]["type"] == "log"
    legend = [t["name"] for t in fig["data"] if t.get("showlegend", True) and t.get("hoverinfo") != "skip"]
    assert legend.count("corpus 1") == 1 and legend.count("corpus 2") == 1  # the spectrum-only one too
    # corpora of like sizes keep linear axes
    fig = growth_figure(_snapshot({1: 50_000, 2: 120_000}))
    assert fig["layout"]["xaxis"]["type"] == "linear" and fig["layout"]["yaxis"]["type"] == "linear"


def test_parameters_read_as_plain_numbers_where_one_reads_better():
    from app.web.templating import significant

    assert significant(53_010.2) == "53,010" and significant(0.81234) == "0.8123"
    assert significant(0.0123456) == "0.01235" and significant(0) == "0"
    assert significant(1.234e-5) == "1.234 × 10⁻⁵" and significant(2.5e12) == "2.500 × 10¹²"
    assert significant(float("nan")) == "–" and significant(None) == "–"
