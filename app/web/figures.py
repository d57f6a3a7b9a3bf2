"""Plotly figures as plain JSON dicts (fast to build; rendered by the locally served plotly.js)."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from app.core.spectrum import Spectrum
from app.services import modelling
from app.services.comparisons import rank_frequency_points, thin_curve

# Okabe & Ito (2008) colour-blind-safe palette for lines. Its yellow #F0E442 is too faint for a line on white:
# the eighth colour is that yellow darkened until it reads as a line (fills may use the pale one).
PALETTE = ["#0072B2", "#E69F00", "#009E73", "#D55E00", "#CC79A7", "#56B4E9", "#000000", "#7A6A00"]
PALE_YELLOW = "#F0E442"
FONT = {"family": "system-ui, -apple-system, Segoe UI, Roboto, sans-serif", "size": 13, "color": "#1d2733"}
OBSERVED = "#33414f"  # observed data: dark slate, solid
RANDOM_ORDER = "#7d8796"  # the random-order expectation: grey, dotted, with a grey band
RECOMMENDED = "#000000"  # the recommended model: black, thick dashes
MODEL_DASHES = (
    "longdash",
    "dashdot",
    "longdashdot",
    "9px,3px,3px,3px,3px,3px",  # dash dot dot
    "18px,5px",  # long dash, short gap
    "5px,4px",  # short dash
    "15px,4px,3px,4px,3px,4px",  # long dash dot dot
)
"""One dash pattern per model; none is solid (the text itself), dotted (the random-order expectation) or the
plain dash of the recommended model, so a model is told apart by its line even without its colour."""


def colour(index: int) -> str:
    return PALETTE[index % len(PALETTE)]


@dataclass(frozen=True)
class ModelStyle:
    """How one model is drawn in every figure of every page: its colour, dash pattern and names."""

    colour: str
    dash: str
    legend: str
    title: str


def model_style(name: str) -> ModelStyle:
    """One colour and one dash pattern per model, everywhere: the model's place i in the registry picks the
    Okabe-Ito colour i and the dash pattern i (black and the plain dash are kept for the recommended model);
    past the seven colours the dash pattern moves on by one more, so no two models share both."""
    titles = modelling.model_titles()
    if name == modelling.RECOMMENDED:
        return ModelStyle(RECOMMENDED, "dash", "recommended", titles[name])
    lines = [c for c in PALETTE if c != RECOMMENDED]
    index = list(modelling.MODELS).index(name)
    title = titles[name]
    return ModelStyle(
        lines[index % len(lines)],
        MODEL_DASHES[(index + index // len(lines)) % len(MODEL_DASHES)],
        short(title),
        title,
    )


def short(title: str) -> str:
    """'power law (Zipf-Mandelbrot)' -> 'power law': legends keep the words, hovers the whole title."""
    return title.split(" (")[0]


def hover(x_unit: str, y_unit: str, y_format: str = ",.0f") -> str:
    """A hover label naming the trace and both values with their units."""
    return f"<b>%{{fullData.name}}</b><br>%{{x:,}} {x_unit}: %{{y:{y_format}}} {y_unit}<extra></extra>"


def translucent(hex_colour: str, alpha: float = 0.18) -> str:
    r, g, b = (int(hex_colour[i : i + 2], 16) for i in (1, 3, 5))
    return f"rgba({r},{g},{b},{alpha})"


def axis(title: str, log: bool = False, **extra: Any) -> dict[str, Any]:
    """An axis titled with its unit; a log axis is labelled as such and ticked at powers of ten only (no
    stray '2' and '5' labels between them)."""
    spec = {
        "title": {"text": f"{title} (log scale)" if log else title},
        "type": "log" if log else "linear",
        "separatethousands": True,
        "tickformat": ",~r",
        **({"dtick": 1, "minor": {"ticks": "outside", "ticklen": 3, "showgrid": False}} if log else {}),
        "gridcolor": "#e6e9ef",
        "zeroline": False,
    }
    return spec | extra


def figure(
    data: list[dict], x_title: str, y_title: str, log_x: bool = False, log_y: bool = False, **layout: Any
) -> dict[str, Any]:
    """A figure with our common layout; the page supplies the title (a finding) and the caption."""
    base = {
        "font": FONT,
        "margin": {"l": 70, "r": 20, "t": 20, "b": 80},
        "paper_bgcolor": "white",
        "plot_bgcolor": "white",
        "legend": {"orientation": "h", "yanchor": "top", "y": -0.3, "x": 0, "font": {"size": 12}},
        "hovermode": "closest",
        "hoverlabel": {"namelength": -1},
        "xaxis": axis(x_title, log_x),
        "yaxis": axis(y_title, log_y),
    }
    units = (_unit(x_title), _unit(y_title))
    data = [
        t if "hovertemplate" in t or t.get("hoverinfo") == "skip" else t | {"hovertemplate": hover(*units)}
        for t in data
    ]
    return {"data": data, "layout": base | layout}


def _unit(title: str) -> str:
    """The unit of an axis title: 'frequency (tokens)' -> 'tokens', 'types' -> 'types'."""
    return title.rsplit("(", 1)[1].rstrip(")") if title.endswith(")") else title


def finite(values) -> list:
    """Values for a figure's JSON: infinite or undefined ones (an unbounded band edge) become gaps (None);
    JSON has no Infinity, and the browser would refuse the whole figure."""
    return [v if v is None or math.isfinite(v) else None for v in values]


def line(x, y, name: str, colour_hex: str, dashed: bool = False, **extra: Any) -> dict[str, Any]:
    return {
        "type": "scatter",
        "mode": "lines",
        "x": finite(x),
        "y": finite(y),
        "name": name,
        "line": {"color": colour_hex, "width": 2, "dash": "dash" if dashed else "solid"},
    } | extra


def band(
    x, low, high, name: str, colour_hex: str, group: str | None = None, alpha: float = 0.18
) -> list[dict]:
    """A translucent band between ``low`` and ``high`` (two traces: lower edge, then filled upper edge). It
    has no legend entry of its own: it belongs to the legend entry of ``group`` (its line), so that clicking
    that entry hides both. Draw bands before lines, so that no fill covers a line."""
    x = list(x)
    edge = {
        "type": "scatter",
        "mode": "lines",
        "line": {"width": 0},
        "hoverinfo": "skip",
        "legendgroup": group or name,
        "showlegend": False,
        "name": name,
    }
    return [
        edge | {"x": x, "y": finite(low)},
        edge | {"x": x, "y": finite(high), "fill": "tonexty", "fillcolor": translucent(colour_hex, alpha)},
    ]


def extrapolation_shading(start: float, end: float, log_x: bool = False) -> dict[str, Any]:
    """Layout pieces that shade the x range [start, end] and label it "extrapolated" at its start (plotly.js
    places annotations on a log axis by log10 of the position, shapes by the position)."""
    return {
        "shapes": [
            {
                "type": "rect",
                "xref": "x",
                "yref": "paper",
                "x0": start,
                "x1": end,
                "y0": 0,
                "y1": 1,
                "fillcolor": "rgba(120,130,150,0.08)",
                "line": {"width": 0},
                "layer": "below",
            }
        ],
        "annotations": [
            {
                # in the middle of the shaded range: hidden with it while the plot shows the observed range only
                "x": (math.log10(start) + math.log10(end)) / 2 if log_x else (start + end) / 2,
                "xref": "x",
                "xanchor": "center",
                "y": 1,
                "yref": "paper",
                "yanchor": "top",
                "text": "extrapolated",
                "showarrow": False,
                "font": {"color": "#5b6675"},
            }
        ],
    }


def vertical_line(x: float, colour_hex: str, width: float = 1) -> dict[str, Any]:
    """A dotted vertical line across the plot at ``x`` (a layout shape)."""
    return {
        "type": "line",
        "xref": "x",
        "yref": "paper",
        "x0": x,
        "x1": x,
        "y0": 0,
        "y1": 1,
        "line": {"color": colour_hex, "width": width, "dash": "dot"},
    }


def views_control(views: dict[str, dict[str, Any]], default: str) -> dict[str, Any]:
    """Named layout changes a page's control applies with Plotly.relayout (kept in layout.meta)."""
    return {"meta": {"views": views, "default_view": default}}


def spectrum_bars(
    pairs: list[tuple[int, int]], models: dict[str, list[float]] | None = None, k_max: int = 20
) -> dict[str, Any]:
    """Observed V_1..V_k_max as bars, with each model's expected values at the corpus size as dashed lines.
    The count axis opens on a log scale (on a linear one every V_m beyond the first few looks flat); the
    page's switch turns it linear."""
    dense = dict(pairs)
    ks = list(range(1, k_max + 1))
    bars = {
        "type": "bar",
        "x": ks,
        "y": [dense.get(k, 0) for k in ks],
        "name": "observed",
        "marker": {"color": "#b9c6d4", "line": {"color": OBSERVED, "width": 1}},
        "hovertemplate": "<b>observed</b><br>%{y:,} types occur exactly %{x} times<extra></extra>",
    }
    lines = []
    for name, values in (models or {}).items():
        style = model_style(name)
        lines.append(
            line(
                ks,
                values[:k_max],
                style.legend,
                style.colour,
                mode="lines+markers",
                marker={"size": 5},
                line={
                    "color": style.colour,
                    "width": 2.5 if name == "recommended" else 2,
                    "dash": style.dash,
                },
                hovertemplate=f"<b>{style.title}</b><br>expected %{{y:,.1f}} types occurring %{{x}} times"
                "<extra></extra>",
            )
        )
    title = "types (V_m)"
    return figure(
        [bars, *lines],
        "m (occurrences per type)",
        title,
        xaxis=axis(
            "m (occurrences per type)", tickvals=[1, 2, 3, 4, 5, 10, 15, 20], range=[0.4, k_max + 0.6]
        ),
        yaxis=axis(title, log=True),
        **views_control(
            {
                "log": {
                    "yaxis.type": "log",
                    "yaxis.autorange": True,
                    "yaxis.dtick": 1,
                    "yaxis.minor.ticks": "outside",
                    "yaxis.title.text": f"{title} (log scale)",
                },
                # a linear axis ticked every 1 would draw thousands of ticks: back to automatic ticks
                "linear": {
                    "yaxis.type": "linear",
                    "yaxis.autorange": True,
                    "yaxis.dtick": None,
                    "yaxis.minor.ticks": "",
                    "yaxis.title.text": title,
                },
            },
            "log",
        ),
    )


RANK_STEPS = 1_000
"""Frequency classes drawn as exact steps in the rank-frequency plot; beyond (only very large or invented
spectra), the frequency at ``RANK_STEPS`` log-spaced ranks, so that the page stays small."""


def rank_frequency(pairs: list[tuple[int, int]]) -> dict[str, Any]:
    """Zipf's rank-frequency plot from the spectrum: the types of frequency m hold the ranks just below those
    of all more frequent types, so the last rank of frequency m is the number of types with f >= m."""
    if len(pairs) > RANK_STEPS:
        ranks, freqs = rank_frequency_points(Spectrum.from_pairs(pairs), RANK_STEPS)
    else:
        ranks, freqs = [], []
        covered = 0
        for m, v in sorted(pairs, reverse=True):
            ranks += [covered + 1, covered + v]
            freqs += [m, m]
            covered += v
    trace = line(
        ranks,
        freqs,
        "observed",
        OBSERVED,
        hovertemplate="rank %{x:,}: %{y:,} occurrences (tokens)<extra></extra>",
    )
    return figure([trace], "rank", "frequency (tokens)", log_x=True, log_y=True, showlegend=False)


GROWTH_POINTS = 1_000
"""Points of the text-order growth curve drawn at most (a counted text stores 301)."""


def growth_lines(
    text_order: list[tuple[int, int]],
    random_order: list[dict],
    models: dict[str, tuple[list[float], list[float]]] | None = None,
    recommended_band: tuple[list[float], list[float], list[float]] | None = None,
    corpus_tokens: int | None = None,
    marker: tuple[float, str] | None = None,
) -> dict[str, Any]:
    """Text-order type growth (solid), the exact random-sample interpolation (dotted; the random-order
    expectation) with its range, and the models (dashed) from the corpus size on, into a shaded extrapolated
    range: at or below the corpus size every model's prediction is the interpolation, drawn once
    (``modelling.continuations``).

    The figure opens on the observed range (0 to N); the page's switch shows the extrapolation (layout.meta
    holds both views)."""
    xs = [p["tokens"] for p in random_order]
    data = []
    rec_group = "recommended"
    if recommended_band:
        bx, low, high = recommended_band
        data += band(
            bx, low, high, "recommended: backtest error band", RECOMMENDED, group=rec_group, alpha=0.12
        )
    data += band(
        xs, [p["low"] for p in random_order], [p["high"] for p in random_order], "random order", RANDOM_ORDER
    )
    data.append(
        line(
            xs,
            [p["types"] for p in random_order],
            "exact interpolation (random order)",
            RANDOM_ORDER,
            legendgroup="random order",
            line={"color": RANDOM_ORDER, "width": 2, "dash": "dot"},
        )
    )
    for name, (mx, my) in (models or {}).items():
        style = model_style(name)
        width = 3 if name == modelling.RECOMMENDED else 2
        data.append(
            line(
                mx,
                my,
                style.legend,
                style.colour,
                legendgroup=name,
                line={"color": style.colour, "width": width, "dash": style.dash},
                hovertemplate=f"<b>{style.title}</b><br>%{{x:,}} tokens: %{{y:,.0f}} types expected<extra></extra>",
            )
        )
    text_order = thin_curve(text_order, GROWTH_POINTS)
    data.append(
        line(
            [n for n, _ in text_order],
            [v for _, v in text_order],
            "text order (observed)",
            OBSERVED,
            line={"color": OBSERVED, "width": 2.5},
        )
    )
    layout: dict[str, Any] = {}
    horizon = max((max(mx) for mx, _ in (models or {}).values()), default=corpus_tokens or 1)
    planned = marker[0] if marker else None
    log_x = bool(corpus_tokens and models and max(horizon, planned or 0) > 50 * corpus_tokens)
    if models and corpus_tokens and horizon > corpus_tokens:
        layout = extrapolation_shading(corpus_tokens, horizon, log_x)
    if marker:
        x, label = marker
        layout.setdefault("shapes", []).append(vertical_line(x, "#CC79A7", 2))
        layout.setdefault("annotations", []).append(
            {
                "x": math.log10(x) if log_x else x,
                "xref": "x",
                "y": 0.92,
                "yref": "paper",
                "text": label,
                "showarrow": False,
                "xanchor": "right",
                "font": {"color": "#8a3f6f"},
                "bgcolor": "rgba(255,255,255,0.8)",
            }
        )
    if corpus_tokens:
        observed_types = max([v for _, v in text_order] + [p["high"] for p in random_order] + [1])
        first = max(1, min([n for n, _ in text_order] + xs + [corpus_tokens]))
        observed_x = [math.log10(first), math.log10(corpus_tokens)] if log_x else [0, corpus_tokens]
        views = {
            "observed": {"xaxis.range": observed_x, "yaxis.range": [0, observed_types * 1.08]},
            "extrapolated": extrapolated_view(
                corpus_tokens, horizon, first, observed_types, models or {}, planned, log_x
            ),
        }
        # a planning answer beyond the text is shown where it lies: the plot then opens on the extrapolation
        default = "extrapolated" if planned and planned > corpus_tokens else "observed"
        layout |= views_control(views, default)
        x_axis = axis("tokens", log_x, range=views[default]["xaxis.range"], autorange=False)
        y_axis = axis("types", False, range=views[default]["yaxis.range"], autorange=False)
        return figure(data, "tokens", "types", xaxis=x_axis, yaxis=y_axis, **layout)
    return figure(data, "tokens", "types", log_x=log_x, **layout)


EXTRAPOLATED_DECADES = 2
"""On a log token axis the extrapolated view starts this many powers of ten below the corpus size: the end of
the text and what follows it, not the first few tokens (which take half of a log axis starting at 1)."""


def extrapolated_view(
    corpus_tokens: int,
    horizon: float,
    first: float,
    observed_types: float,
    models: dict[str, tuple[list[float], list[float]]],
    planned: float | None,
    log_x: bool,
) -> dict[str, Any]:
    """The axis ranges of the extrapolated view, chosen from what it must show: the text's end, the model
    curves up to the horizon and the planning answer. The types axis reaches the highest model curve (and
    the text), not the upper edge of a band, which may lie far above every curve."""
    right = max(horizon, 1.1 * planned if planned else 0)
    curves = [y for _, ys in models.values() for y in ys if y is not None and math.isfinite(y)]
    top = max([observed_types, *curves])
    if log_x:
        left = max(first, corpus_tokens / 10**EXTRAPOLATED_DECADES)
        x_range = [math.log10(left), math.log10(right)]
    else:
        x_range = [0, right]
    return {"xaxis.range": x_range, "yaxis.range": [0, top * 1.08]}
