"""Plotly figures as plain JSON dicts (fast to build; rendered by the locally served plotly.js)."""

from __future__ import annotations

from typing import Any

# Okabe & Ito (2008) colour-blind-safe palette.
PALETTE = ["#0072B2", "#E69F00", "#009E73", "#D55E00", "#CC79A7", "#56B4E9", "#F0E442", "#000000"]
FONT = {"family": "system-ui, -apple-system, Segoe UI, Roboto, sans-serif", "size": 13, "color": "#1d2733"}


def colour(index: int) -> str:
    return PALETTE[index % len(PALETTE)]


def translucent(hex_colour: str, alpha: float = 0.18) -> str:
    r, g, b = (int(hex_colour[i : i + 2], 16) for i in (1, 3, 5))
    return f"rgba({r},{g},{b},{alpha})"


def axis(title: str, log: bool = False, **extra: Any) -> dict[str, Any]:
    spec = {
        "title": {"text": f"{title} (log scale)" if log else title},
        "type": "log" if log else "linear",
        "separatethousands": True,
        "tickformat": "" if log else ",~r",
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
        "legend": {"orientation": "h", "y": -0.28, "x": 0},
        "hovermode": "closest",
        "xaxis": axis(x_title, log_x),
        "yaxis": axis(y_title, log_y),
    }
    return {"data": data, "layout": base | layout}


def line(x, y, name: str, colour_hex: str, dashed: bool = False, **extra: Any) -> dict[str, Any]:
    return {
        "type": "scatter",
        "mode": "lines",
        "x": list(x),
        "y": list(y),
        "name": name,
        "line": {"color": colour_hex, "width": 2, "dash": "dash" if dashed else "solid"},
    } | extra


def band(x, low, high, name: str, colour_hex: str) -> list[dict[str, Any]]:
    """A translucent band between ``low`` and ``high`` (two traces: lower edge, then filled upper edge)."""
    x = list(x)
    edge = {
        "type": "scatter",
        "mode": "lines",
        "line": {"width": 0},
        "hoverinfo": "skip",
        "legendgroup": name,
    }
    return [
        edge | {"x": x, "y": list(low), "showlegend": False, "name": name},
        edge
        | {"x": x, "y": list(high), "fill": "tonexty", "fillcolor": translucent(colour_hex), "name": name},
    ]


def extrapolation_shading(start: float, end: float) -> dict[str, Any]:
    """Layout pieces that shade the x range [start, end] and label it "extrapolated"."""
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
                "x": 1,
                "xref": "paper",
                "xanchor": "right",
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


def spectrum_bars(
    pairs: list[tuple[int, int]], models: dict[str, list[float]] | None = None, k_max: int = 20
):
    """Observed V_1..V_k_max as bars, with each model's expected values at the corpus size as dashed lines."""
    dense = dict(pairs)
    ks = list(range(1, k_max + 1))
    bars = {
        "type": "bar",
        "x": ks,
        "y": [dense.get(k, 0) for k in ks],
        "name": "observed V_m",
        "marker": {"color": "#9fb3c8"},
        "hovertemplate": "observed V_%{x} = %{y:,}<extra></extra>",
    }
    lines = [
        line(ks, values[:k_max], name, colour(i), dashed=True, mode="lines+markers", marker={"size": 5})
        for i, (name, values) in enumerate((models or {}).items())
    ]
    return figure(
        [bars, *lines],
        "m (occurrences per type)",
        "V_m (types)",
        xaxis=axis("m (occurrences per type)", dtick=1),
    )


def rank_frequency(pairs: list[tuple[int, int]]) -> dict[str, Any]:
    """Zipf's rank-frequency plot from the spectrum: the types of frequency m hold the ranks just below those
    of all more frequent types, so the last rank of frequency m is the number of types with f >= m."""
    ranks, freqs = [], []
    covered = 0
    for m, v in sorted(pairs, reverse=True):
        ranks += [covered + 1, covered + v]
        freqs += [m, m]
        covered += v
    trace = line(
        ranks, freqs, "observed", colour(0), hovertemplate="rank %{x:,}: %{y:,} tokens<extra></extra>"
    )
    return figure([trace], "rank", "frequency (tokens)", log_x=True, log_y=True, showlegend=False)


def growth_lines(
    text_order: list[tuple[int, int]],
    random_order: list[dict],
    models: dict[str, tuple[list[float], list[float]]] | None = None,
    recommended_band: tuple[list[float], list[float], list[float]] | None = None,
    corpus_tokens: int | None = None,
    marker: tuple[float, str] | None = None,
) -> dict[str, Any]:
    """Text-order type growth (solid), the random-order expectation with its 95% band, and model curves
    (dashed) reaching into a shaded extrapolated range beyond the corpus size."""
    xs = [p["tokens"] for p in random_order]
    data = []
    if recommended_band:
        bx, low, high = recommended_band
        data += band(bx, low, high, "recommended: backtest error band", "#000000")
    data += band(
        xs,
        [p["low"] for p in random_order],
        [p["high"] for p in random_order],
        "random order: 95% band",
        colour(1),
    )
    data.append(
        line(xs, [p["types"] for p in random_order], "random order: expected types", colour(1), dashed=True)
    )
    for i, (name, (mx, my)) in enumerate((models or {}).items(), start=2):
        style = {"color": "#000000", "width": 2.5, "dash": "dash"} if name.startswith("recommended") else None
        data.append(line(mx, my, name, colour(i), dashed=True, **({"line": style} if style else {})))
    data.append(
        line([n for n, _ in text_order], [v for _, v in text_order], "text order (observed)", colour(0))
    )
    layout: dict[str, Any] = {}
    if models and corpus_tokens:
        horizon = max(max(mx) for mx, _ in models.values())
        if horizon > corpus_tokens:
            layout = extrapolation_shading(corpus_tokens, horizon)
    if marker:
        x, label = marker
        layout.setdefault("shapes", []).append(vertical_line(x, "#CC79A7", 2))
        layout.setdefault("annotations", []).append(
            {
                "x": x,
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
    log_x = bool(corpus_tokens and models and max(max(mx) for mx, _ in models.values()) > 50 * corpus_tokens)
    return figure(data, "tokens", "types", log_x=log_x, **layout)
