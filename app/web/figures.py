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
        "margin": {"l": 70, "r": 20, "t": 20, "b": 60},
        "paper_bgcolor": "white",
        "plot_bgcolor": "white",
        "legend": {"orientation": "h", "y": -0.22, "x": 0},
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


def spectrum_bars(pairs: list[tuple[int, int]], k_max: int = 20) -> dict[str, Any]:
    """Observed V_1..V_k_max as bars."""
    dense = dict(pairs)
    ks = list(range(1, k_max + 1))
    bars = {
        "type": "bar",
        "x": ks,
        "y": [dense.get(k, 0) for k in ks],
        "name": "observed V_m",
        "marker": {"color": colour(0)},
        "hovertemplate": "V_%{x} = %{y:,}<extra></extra>",
    }
    return figure(
        [bars], "m (occurrences per type)", "V_m (types)", xaxis=axis("m (occurrences per type)", dtick=1)
    )


def growth_lines(text_order: list[tuple[int, int]], random_order: list[dict]) -> dict[str, Any]:
    """Text-order type growth (solid) with the random-order expectation and its 95% band."""
    xs = [p["tokens"] for p in random_order]
    data = band(
        xs,
        [p["low"] for p in random_order],
        [p["high"] for p in random_order],
        "random order: 95% band",
        colour(1),
    )
    data.append(
        line(xs, [p["types"] for p in random_order], "random order: expected types", colour(1), dashed=True)
    )
    data.append(
        line([n for n, _ in text_order], [v for _, v in text_order], "text order (observed)", colour(0))
    )
    return figure(data, "tokens", "types")
