"""Figures of the comparison page, built from a comparison snapshot only (so a permalink redraws them exactly).

One colour per corpus (Okabe-Ito, in the order the corpora were chosen) in every figure; clicking a corpus in a
legend hides all of its curves. Corpus names and labels are escaped as entities, because plotly.js reads a few
HTML-like tags in trace names; the page embeds the figure JSON escaped for <script> context.
"""

from __future__ import annotations

import html
import math
from dataclasses import dataclass
from typing import Any

from app.web.figures import axis, band, colour, figure, line, translucent, vertical_line

LOG_AXIS_RATIO = 20  # tokens on a log axis when the smallest corpus would fill less than 1/20 of the width
SHADE_ALL = "rgba(120,130,150,0.13)"
SHADE_SOME = "rgba(120,130,150,0.05)"
MUTED = "#5b6675"
MIN_SHARE = 1e-4  # legomena shares below 0.01% are not drawn
MARGIN = {"l": 70, "r": 20, "t": 34, "b": 80}


@dataclass(frozen=True)
class ComparisonFigure:
    """A figure with its id on the page, a title that states the finding, a caption saying how it was
    computed, and the file name of its PNG/SVG download."""

    id: str
    figure: dict[str, Any]
    title: str
    caption: str
    filename: str


def plotly_text(text: str) -> str:
    """Text that plotly.js shows literally: &, < and > written as entities."""
    return html.escape(text, quote=False)


def legend_name(corpus: dict[str, Any]) -> str:
    """The corpus name alone: its labels are shown once, in the table of corpora, not in every legend."""
    return plotly_text(corpus["name"])


@dataclass(frozen=True)
class _Style:
    colour: str
    legend: str
    group: str


def _styles(snapshot: dict[str, Any]) -> dict[int, _Style]:
    return {
        c["id"]: _Style(colour(c["colour_index"]), legend_name(c), f"corpus-{c['id']}")
        for c in snapshot["corpora"]
    }


def _quiet(trace: dict[str, Any], style: _Style) -> dict[str, Any]:
    """A trace that belongs to its corpus's legend entry without an entry of its own."""
    return trace | {"legendgroup": style.group, "showlegend": False}


def _band(x: list[float], low: list, high: list, style: _Style, alpha: float) -> list[dict[str, Any]]:
    """A translucent band in the corpus's colour, over the points where both edges are known (a model's
    upper edge is missing where its error band no longer bounds it)."""
    known = [i for i, (lo, hi) in enumerate(zip(low, high, strict=True)) if lo is not None and hi is not None]
    traces = band(
        [x[i] for i in known], [low[i] for i in known], [high[i] for i in known], style.legend, style.colour
    )
    return [
        _quiet(t | ({"fillcolor": translucent(style.colour, alpha)} if "fill" in t else {}), style)
        for t in traces
    ]


def _shade(
    x0: float, x1: float, fill: str, label: str, anchor: str, inside: bool = False
) -> tuple[dict, dict]:
    """A shaded x range behind the curves, labelled at its ``anchor`` ("left"/"right") end: above the plot,
    or ``inside`` it under the top edge (so that two labels of neighbouring ranges never run into each other
    on a narrow screen)."""
    shape = {
        "type": "rect",
        "xref": "x",
        "yref": "paper",
        "x0": x0,
        "x1": x1,
        "y0": 0,
        "y1": 1,
        "fillcolor": fill,
        "line": {"width": 0},
        "layer": "below",
    }
    note = {
        "x": x1 if anchor == "right" else x0,
        "xref": "x",
        "xanchor": anchor,
        "y": 1,
        "yref": "paper",
        "yanchor": "top" if inside else "bottom",
        "text": label,
        "showarrow": False,
        "font": {"color": MUTED, "size": 12},
    }
    return shape, note


def _marker(x: float, label: str) -> tuple[dict, dict]:
    """A dotted vertical line at ``x``, labelled at the bottom of the plot."""
    shape = vertical_line(x, MUTED)
    note = {
        "x": x,
        "xref": "x",
        "xanchor": "left",
        "y": 0,
        "yref": "paper",
        "yanchor": "bottom",
        "text": f" {label}",
        "showarrow": False,
        "font": {"color": MUTED, "size": 12},
    }
    return shape, note


def growth_figure(snapshot: dict[str, Any], normalised: bool = False) -> dict[str, Any]:
    """Type growth of every corpus: text order (solid), random order (dotted, with its range) and the recommended
    model beyond the corpus size (dashed, backtest band); x in tokens, or as a share of each corpus's size."""
    styles = _styles(snapshot)
    sizes = {c["id"]: c["tokens"] for c in snapshot["corpora"]}
    horizon = snapshot["settings"]["horizon"]
    bands: list[dict[str, Any]] = []  # every band first, so that no fill covers another corpus's lines
    data: list[dict[str, Any]] = []
    unit = "× corpus size" if normalised else "tokens"
    for curves in snapshot["growth"]:
        cid = curves["corpus_id"]
        style = styles[cid]
        scale = sizes[cid] if normalised else 1
        rnd, model, text = curves["random_order"], curves["model"], curves["text_order"]
        x_rnd = [n / scale for n in rnd["tokens"]]
        bands += _band(x_rnd, rnd["low"], rnd["high"], style, 0.12)
        dotted = {"color": style.colour, "width": 1.5, "dash": "dot"}
        name = f"{style.legend}: random order"
        random_line = line(
            x_rnd, rnd["types"], name, style.colour, line=dotted, hovertemplate=_hover(name, unit)
        )
        if text["tokens"]:
            data.append(_quiet(random_line, style))
        else:  # counts or a spectrum, no text order: its random-order curve holds its legend entry
            data.append(random_line | {"name": style.legend, "legendgroup": style.group})
        if model:
            x_model = [n / scale for n in model["tokens"]]
            bands += _band(x_model, model["low"], model["high"], style, 0.06)
            name = f"{style.legend}: recommended model"
            data.append(
                _quiet(
                    line(
                        x_model,
                        model["types"],
                        name,
                        style.colour,
                        dashed=True,
                        hovertemplate=_hover(name, unit),
                    ),
                    style,
                )
            )
        if text["tokens"]:
            data.append(
                line(
                    [n / scale for n in text["tokens"]],
                    text["types"],
                    style.legend,
                    style.colour,
                    legendgroup=style.group,
                    meta={"role": "observed", "corpus_id": cid},
                    hovertemplate=_hover(f"{style.legend}: text order", unit),
                )
            )
    data = bands + data
    smallest, largest = min(sizes.values()), max(sizes.values())
    pieces = []
    if normalised:
        right = max(horizon / n for n in sizes.values())
        if right > 1:
            pieces.append(
                _shade(1, right, SHADE_ALL, "extrapolated (beyond each corpus's own size)", "right")
            )
        log_x, x_title = right > LOG_AXIS_RATIO, "tokens as a share of the corpus size (1 = the whole corpus)"
    else:
        if horizon > largest:
            pieces.append(_shade(largest, horizon, SHADE_ALL, "extrapolated", "right"))
        if horizon > smallest and largest > smallest:
            pieces.append(
                _shade(
                    smallest, min(largest, horizon), SHADE_SOME, "extrapolated for some", "left", inside=True
                )
            )
        pieces.append(_marker(snapshot["size_matched"]["tokens"], "common size"))
        log_x, x_title = max(horizon, largest) > LOG_AXIS_RATIO * smallest, "tokens"
    # a log token axis spans corpora of very different sizes; the types then go on a log axis too, so that a
    # corpus of a few hundred tokens is not a flat line at 0 under one of a hundred thousand
    return figure(
        data,
        x_title,
        "types",
        log_x=log_x,
        log_y=log_x,
        shapes=[s for s, _ in pieces],
        # plotly.js places annotations on a log axis by log10 of the position (shapes by the position)
        annotations=[n | {"x": math.log10(n["x"])} if log_x else n for _, n in pieces],
        margin=MARGIN,
    )


def _hover(name: str, x_unit: str) -> str:
    """A hover label with the whole trace name and both values with their units."""
    return f"<b>{name}</b><br>%{{x:,}} {x_unit}: %{{y:,.0f}} types<extra></extra>"


def _drawable(shares: list[float | None]) -> list[float | None]:
    """Shares on a log axis: zero and negligible ones (below MIN_SHARE) left out as gaps."""
    return [v if v is not None and v >= MIN_SHARE else None for v in shares]


def legomena_figure(snapshot: dict[str, Any]) -> dict[str, Any]:
    """Legomena profiles V_k / V, k = 1..10: observed at each corpus's size (solid) and expected at the
    common size (dashed)."""
    styles = _styles(snapshot)
    ks = snapshot["legomena"]["k"]
    data = []
    for profile in snapshot["legomena"]["rows"]:
        style = styles[profile["corpus_id"]]
        share = "%{y:.2%} of the types occur exactly %{x} times<extra></extra>"
        if profile["predicted"]:
            data.append(
                line(
                    ks,
                    _drawable(profile["predicted"]),
                    style.legend,
                    style.colour,
                    mode="lines+markers",
                    legendgroup=style.group,
                    meta={"role": "size-matched", "corpus_id": profile["corpus_id"]},
                    hovertemplate=f"<b>{style.legend}</b>, at the common size:<br>{share}",
                )
            )
        if profile["observed"]:
            trace = line(
                ks,
                _drawable(profile["observed"]),
                f"{style.legend}: at its own size",
                style.colour,
                mode="markers",
                marker={"symbol": "circle-open", "size": 7},
                meta={"role": "observed", "corpus_id": profile["corpus_id"]},
                hovertemplate=f"<b>{style.legend}</b>, at its own size:<br>{share}",
            )
            data.append(
                _quiet(trace, style) if profile["predicted"] else trace | {"legendgroup": style.group}
            )
    return figure(
        data,
        "k (occurrences per type)",
        "V_k / V",
        xaxis=axis("k (occurrences per type)", dtick=1),
        yaxis=axis("V_k / V", log=True, dtick=1, tickformat="~%"),
        margin=MARGIN,
    )


def rank_frequency_figure(snapshot: dict[str, Any]) -> dict[str, Any]:
    """Rank-frequency curves of every corpus on log-log axes (log-spaced ranks)."""
    styles = _styles(snapshot)
    data = []
    for points in snapshot["rank_frequency"]:
        style = styles[points["corpus_id"]]
        data.append(
            line(
                points["ranks"],
                points["frequencies"],
                style.legend,
                style.colour,
                mode="lines+markers",
                marker={"size": 3},
                legendgroup=style.group,
                meta={"role": "observed", "corpus_id": points["corpus_id"]},
                hovertemplate=f"{style.legend}<br>rank %{{x:,}}: %{{y:,}} tokens<extra></extra>",
            )
        )
    return figure(
        data,
        "rank",
        "frequency (tokens)",
        xaxis=axis("rank", log=True, dtick=1),
        yaxis=axis("frequency (tokens)", log=True, dtick=1),
        margin=MARGIN,
    )


# ---------------------------------------------------------------------------------- titles (findings)


def _extremes(values: dict[int, float], names: dict[int, str]) -> tuple[str, float, str, float] | None:
    known = {k: v for k, v in values.items() if v is not None}
    if len(known) < 2:
        return None
    high = max(known, key=known.get)
    low = min(known, key=known.get)
    return names[high], known[high], names[low], known[low]


def _growth_title(snapshot: dict[str, Any], names: dict[int, str]) -> str:
    size = snapshot["size_matched"]["tokens"]
    ext = _extremes({r["corpus_id"]: r["types"] for r in snapshot["size_matched"]["rows"]}, names)
    if ext is None:
        return "Type growth of the compared corpora"
    return f"At {size:,} tokens, {ext[0]} has the most types ({ext[1]:,.0f}) and {ext[2]} the fewest ({ext[3]:,.0f})"


def _legomena_title(snapshot: dict[str, Any], names: dict[int, str]) -> str:
    size = snapshot["size_matched"]["tokens"]
    shares = {r["corpus_id"]: (r["predicted"] or [None])[0] for r in snapshot["legomena"]["rows"]}
    ext = _extremes(shares, names)
    if ext is None:
        return "Legomena profiles of the compared corpora"
    return (
        f"At {size:,} tokens, hapax legomena are {ext[3]:.0%} of the types in {ext[2]} "
        f"and {ext[1]:.0%} in {ext[0]}"
    )


def _rank_title(snapshot: dict[str, Any], names: dict[int, str]) -> str:
    sizes = {c["id"]: c["tokens"] for c in snapshot["corpora"]}
    top = {
        p["corpus_id"]: p["frequencies"][0] / sizes[p["corpus_id"]]
        for p in snapshot["rank_frequency"]
        if p["frequencies"]
    }
    ext = _extremes(top, names)
    if ext is None:
        return "Rank-frequency curves of the compared corpora"
    return f"The most frequent word is {ext[3]:.1%} of the tokens in {ext[2]} and {ext[1]:.1%} in {ext[0]}"


def comparison_figures(snapshot: dict[str, Any]) -> list[ComparisonFigure]:
    """The figures of the comparison page, in page order (the second is the normalised growth view)."""
    names = {c["id"]: c["name"] for c in snapshot["corpora"]}
    size = snapshot["size_matched"]["tokens"]
    horizon = snapshot["settings"]["horizon"]
    growth_caption = (
        "Solid: types seen when reading each text from the start (text order){against}. Dotted, with a band in "
        "the same colour: expected types of random samples of that size and their range (exact "
        "hypergeometric). Dashed, with a lighter band: the recommended model beyond each corpus's own size, up "
        f"to the horizon of {horizon:,} tokens, with its error band. Shaded background: extrapolated "
        "range. One colour per corpus; click a name in the legend to hide or show all its curves."
    )
    return [
        ComparisonFigure(
            "growth-plot",
            growth_figure(snapshot),
            _growth_title(snapshot, names),
            growth_caption.format(against=""),
            "type-growth",
        ),
        ComparisonFigure(
            "growth-share-plot",
            growth_figure(snapshot, normalised=True),
            _growth_title(snapshot, names),
            growth_caption.format(against=", against the share of that corpus read (1 = the whole corpus)"),
            "type-growth-normalised",
        ),
        ComparisonFigure(
            "legomena-plot",
            legomena_figure(snapshot),
            _legomena_title(snapshot, names),
            f"Lines with dots: shares V_k / V of the types occurring exactly k times, expected at the common size "
            f"of {size:,} tokens, where the corpora can be compared (exact interpolation; the recommended model "
            "where the common size exceeds a corpus). Open circles without a line: the same shares observed at "
            "each corpus's own size. One colour per corpus; log scale; shares below 0.01% are not drawn.",
            "legomena-profiles",
        ),
        ComparisonFigure(
            "rank-plot",
            rank_frequency_figure(snapshot),
            _rank_title(snapshot, names),
            "Frequency of the word at each rank, from the frequency spectrum, at about 150 log-spaced ranks per "
            "corpus; both axes log scale. Zipf's law predicts a straight line of slope -1.",
            "rank-frequency",
        ),
    ]
