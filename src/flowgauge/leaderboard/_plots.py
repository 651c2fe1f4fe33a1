"""Inline SVG plots for the page, drawn with matplotlib so that the bytes are deterministic:
text kept as text (``svg.fonttype='none'``), a fixed ``svg.hashsalt`` per plot for element
ids, and no date or creator in the metadata."""

from __future__ import annotations

import io
import math

import matplotlib

matplotlib.use("Agg")  # no display: the plots are written to SVG only

from matplotlib.figure import Figure  # noqa: E402

from ._ranking import metric_value  # noqa: E402

__all__ = ["tradeoff_svg", "split_bars_svg"]

_MARKERS = ("o", "s", "^", "D", "v", "P")
_RC = {"svg.fonttype": "none", "font.family": "sans-serif", "font.size": 9,
       "axes.prop_cycle": matplotlib.cycler(color=matplotlib.colormaps["tab10"].colors)}


def _svg(fig: Figure, salt: str) -> str:
    buf = io.StringIO()
    with matplotlib.rc_context({**_RC, "svg.hashsalt": salt}):
        fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None})
    text = buf.getvalue()
    return text[text.index("<svg"):]  # drop the XML prolog and doctype: the page is HTML


def _colour(i: int):
    return matplotlib.colormaps["tab10"].colors[i % 10]


def _value(card: dict, metric: str) -> float:
    v = metric_value(card, metric)
    return math.nan if v is None else v


def tradeoff_svg(network: str, entries: dict, splits: tuple[str, ...], order: list[str]) -> str:
    """Mean absolute restored gap [%] against restoration failure rate, one colour per entry,
    one marker per split, and a larger ringed marker for the mean over the splits."""
    with matplotlib.rc_context({**_RC, "svg.hashsalt": f"flowgauge-{network}-tradeoff"}):
        fig = Figure(figsize=(6.4, 4.0))
        ax = fig.add_subplot()
        names = order + sorted(set(entries) - set(order))
        colour_of = {n: i for i, n in enumerate(sorted(entries))}  # same colours as the bars
        for name in names:
            i = colour_of[name]
            xs, ys = [], []
            for j, split in enumerate(splits):
                sc = entries[name].get(split)
                if sc is None:
                    continue
                x = _value(sc.card, "restoration_failure_rate")
                y = _value(sc.card, "restored_gap_pct_abs_mean")
                xs.append(x)
                ys.append(y)
                ax.scatter([x], [y], color=_colour(i), marker=_MARKERS[j % len(_MARKERS)], s=30,
                           alpha=0.8, label=split if i == 0 else None)
            if len(xs) == len(splits):
                mx, my = sum(xs) / len(xs), sum(ys) / len(ys)
                ax.scatter([mx], [my], facecolor="none", edgecolor=_colour(i), s=160, lw=1.5)
                ax.annotate(name, (mx, my), xytext=(6, 6), textcoords="offset points",
                            color=_colour(i))
        ax.margins(x=0.18, y=0.15)  # room for the entry labels beside the rings
        ax.set_xlabel("restoration failure rate (lower is better)")
        ax.set_ylabel("mean |restored gap| [%] (lower is better)")
        ax.set_title(f"{network}: mean |restored gap| against restoration failure rate")
        ax.grid(True, lw=0.4, alpha=0.5)
        if names:
            ax.legend(title="split (ring: mean)", fontsize=8, loc="best")
        fig.tight_layout()
        return _svg(fig, f"flowgauge-{network}-tradeoff")


def split_bars_svg(network: str, entries: dict, splits: tuple[str, ...]) -> str:
    """Restoration failure rate per split, one bar per entry in each split's group."""
    with matplotlib.rc_context({**_RC, "svg.hashsalt": f"flowgauge-{network}-bars"}):
        fig = Figure(figsize=(6.4, 3.4))
        ax = fig.add_subplot()
        names = sorted(entries)
        width = 0.8 / max(len(names), 1)
        for i, name in enumerate(names):
            xs, hs = [], []
            for j, split in enumerate(splits):
                sc = entries[name].get(split)
                if sc is not None:
                    xs.append(j - 0.4 + width * (i + 0.5))
                    hs.append(_value(sc.card, "restoration_failure_rate"))
            ax.bar(xs, hs, width=width, color=_colour(i), label=name)
        ax.set_xticks(range(len(splits)), list(splits))
        ax.set_ylabel("restoration failure rate")
        ax.set_title(f"{network}: restoration failure rate per split (lower is better)")
        ax.grid(True, axis="y", lw=0.4, alpha=0.5)
        if names:  # below the axes, so that no bar is hidden behind it
            ax.legend(fontsize=8, loc="upper center", bbox_to_anchor=(0.5, -0.12),
                      ncol=min(len(names), 3), frameon=False)
        fig.tight_layout()
        return _svg(fig, f"flowgauge-{network}-bars")
