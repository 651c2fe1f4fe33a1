"""Inline SVG plots for the page, drawn with matplotlib so that the bytes are deterministic:
text kept as text (``svg.fonttype='none'``), a fixed ``svg.hashsalt`` per plot for element
ids, no date or creator in the metadata, and every element id prefixed with the plot's own
prefix (several SVGs share one page, and matplotlib numbers its ids from 1 in each).

Entry names are submitters' text: they reach the plots as one capped line, never parsed as
mathtext, and matplotlib's SVG writer escapes them as XML."""

from __future__ import annotations

import contextlib
import io
import math
import re
import warnings

import matplotlib

matplotlib.use("Agg")  # no display: the plots are written to SVG only

from matplotlib.backends.backend_agg import FigureCanvasAgg  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402
from matplotlib.transforms import Bbox  # noqa: E402

from ._ranking import metric_value  # noqa: E402
from ._text import clean  # noqa: E402

__all__ = ["tradeoff_svg", "split_bars_svg", "curves_svg", "coverage_svg", "prefix_ids", "LABEL_CAP"]

LABEL_CAP = 32  # characters of an entry name shown in a plot (the tables show it whole)
_MARKERS = ("o", "s", "^", "D", "v", "P")
# Sizes in points. The page shows a 6-inch figure in a column about 480-570 px wide, so 10 pt
# text appears at about 11-13 px.
_RC = {"svg.fonttype": "none", "font.family": "sans-serif", "font.size": 10,
       "axes.titlesize": 11, "legend.fontsize": 10,
       "axes.prop_cycle": matplotlib.cycler(color=matplotlib.colormaps["tab10"].colors)}
_WIDTH_IN = 6.0


def _svg(fig: Figure, salt: str, id_prefix: str) -> str:
    buf = io.StringIO()
    with matplotlib.rc_context({**_RC, "svg.hashsalt": salt}):
        fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None})
    text = buf.getvalue()
    return prefix_ids(text[text.index("<svg"):], id_prefix)  # no XML prolog: the page is HTML


_TAG = re.compile(r"<(?!!--)[^>]*>")
_ID = re.compile(r'\bid="([^"]+)"')


def prefix_ids(svg: str, prefix: str) -> str:
    """Every ``id`` in the SVG's tags, and every reference to one (``href="#..."``,
    ``url(#...)``), prefixed with ``prefix-``; text and comments are left alone."""
    ids = {m.group(1) for tag in _TAG.findall(svg) for m in _ID.finditer(tag)}

    def fix(match: re.Match) -> str:
        tag = _ID.sub(lambda m: f'id="{prefix}-{m.group(1)}"', match.group(0))
        return re.sub(r'(href="#|url\(#)([^")]+)',
                      lambda m: m.group(1) + (f"{prefix}-{m.group(2)}" if m.group(2) in ids
                                              else m.group(2)), tag)

    return _TAG.sub(fix, svg)


def _colour(i: int):
    return matplotlib.colormaps["tab10"].colors[i % 10]


def _value(card: dict, metric: str) -> float:
    v = metric_value(card, metric)
    return math.nan if v is None else v


def _label(name: str) -> str:
    return clean(name, LABEL_CAP)


def _plain_text(texts) -> None:
    for t in texts:  # "$...$" in a name is text, not mathtext (which can also fail to parse)
        t.set_parse_math(False)


# Label offsets tried in order [points]: beside the ring first, then further out in eight
# directions; the text is aligned away from its point.
_DIRECTIONS = ((1, 1), (1, -1), (-1, 1), (-1, -1), (1, 0), (-1, 0), (0, 1), (0, -1))
_RADII = (9, 20, 32, 46, 62)


def _place_labels(fig: Figure, ax, points: list[tuple[float, float, str, tuple]]) -> None:
    """Annotate each (x, y, name, colour) where its text overlaps no other label, no ring and
    stays inside the axes, trying the offsets above in order (the first free one wins, else the
    one with the least overlap). Deterministic: the same points give the same places."""
    renderer = FigureCanvasAgg(fig).get_renderer()
    frame = ax.get_window_extent(renderer)
    ring = 9 * fig.dpi / 72  # the ring's radius (s=160 points^2) [pixels], with a margin
    rings = [Bbox.from_extents(px - ring, py - ring, px + ring, py + ring)
             for px, py in (ax.transData.transform((x, y)) for x, y, *_ in points)]
    placed: list[Bbox] = []
    for x, y, name, colour in points:
        best = None
        for radius in _RADII:
            for dx, dy in _DIRECTIONS:
                ann = ax.annotate(
                    name, (x, y), xytext=(dx * radius, dy * radius), textcoords="offset points",
                    color=colour, ha={1: "left", -1: "right", 0: "center"}[dx],
                    va={1: "bottom", -1: "top", 0: "center"}[dy], annotation_clip=False,
                    arrowprops=None if radius == _RADII[0] else
                    {"arrowstyle": "-", "color": colour, "lw": 0.6, "shrinkA": 0, "shrinkB": 6})
                ann.set_parse_math(False)
                box = ann.get_window_extent(renderer).padded(2)
                outside = (max(0, frame.x0 - box.x0) + max(0, box.x1 - frame.x1)
                           + max(0, frame.y0 - box.y0) + max(0, box.y1 - frame.y1))
                cost = sum(_overlap(box, b) for b in placed + rings) + 100 * outside
                if best is None or cost < best[0]:
                    if best is not None:
                        best[1].remove()
                    best = (cost, ann, box)
                else:
                    ann.remove()
                if cost == 0:
                    break
            if best[0] == 0:
                break
        placed.append(best[2])


def _overlap(a: Bbox, b: Bbox) -> float:
    w = min(a.x1, b.x1) - max(a.x0, b.x0)
    h = min(a.y1, b.y1) - max(a.y0, b.y0)
    return w * h if w > 0 and h > 0 else 0.0


@contextlib.contextmanager
def _quiet_glyphs():
    """A name may hold characters the font lacks: the SVG keeps them as text (the browser
    finds a font), so matplotlib's warning about the missing glyph is not for the user."""
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=r"Glyph \d+ .* missing from",
                                category=UserWarning)
        yield


def tradeoff_svg(network: str, entries: dict, splits: tuple[str, ...], order: list[str], *,
                 id_prefix: str = "tradeoff") -> str:
    """Mean absolute restored gap [%] against restoration failure rate, one colour per entry,
    one marker per split, and a larger ringed marker, labelled, for the mean over the splits."""
    with _quiet_glyphs(), matplotlib.rc_context({**_RC, "svg.hashsalt": f"flowgauge-{network}-tradeoff"}):
        fig = Figure(figsize=(_WIDTH_IN, 4.6))
        ax = fig.add_subplot()
        names = order + sorted(set(entries) - set(order))
        colour_of = {n: i for i, n in enumerate(sorted(entries))}  # same colours as the bars
        means = []
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
                           alpha=0.8, label=clean(split) if i == 0 else None)
            if len(xs) == len(splits):
                mx, my = sum(xs) / len(xs), sum(ys) / len(ys)
                ax.scatter([mx], [my], facecolor="none", edgecolor=_colour(i), s=160, lw=1.5)
                if math.isfinite(mx) and math.isfinite(my):
                    means.append((mx, my, _label(name), _colour(i)))
        ax.margins(x=0.25, y=0.2)  # room for the entry labels beside the rings
        ax.set_xlabel("restoration failure rate (lower is better)")
        ax.set_ylabel("mean |restored gap| [%] (lower is better)")
        ax.set_title(f"{_label(network)}: mean |restored gap| against failure rate")
        _plain_text([ax.title])
        ax.grid(True, lw=0.4, alpha=0.5)
        if names:  # below the axes, so that it hides no point and no label
            legend = ax.legend(title="split (ring: mean over the splits)", loc="upper center",
                               bbox_to_anchor=(0.5, -0.16), ncol=min(len(splits), 4),
                               frameon=False)
            _plain_text(legend.get_texts())
        fig.tight_layout()
        _place_labels(fig, ax, means)
        return _svg(fig, f"flowgauge-{network}-tradeoff", id_prefix)


def split_bars_svg(network: str, entries: dict, splits: tuple[str, ...], *,
                   id_prefix: str = "bars") -> str:
    """Restoration failure rate per split, one bar per entry in each split's group."""
    with _quiet_glyphs(), matplotlib.rc_context({**_RC, "svg.hashsalt": f"flowgauge-{network}-bars"}):
        fig = Figure(figsize=(_WIDTH_IN, 3.8))
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
            ax.bar(xs, hs, width=width, color=_colour(i), label=_label(name))
        ax.set_xticks(range(len(splits)), [clean(s) for s in splits])
        _plain_text(ax.get_xticklabels())
        ax.set_ylabel("restoration failure rate")
        ax.set_title(f"{_label(network)}: restoration failure rate per split")
        _plain_text([ax.title])
        ax.grid(True, axis="y", lw=0.4, alpha=0.5)
        if names:  # below the axes, so that no bar is hidden behind it
            longest = max(len(_label(n)) for n in names)
            legend = ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.12),
                               ncol=max(1, min(len(names), 3, 60 // (longest + 4))),
                               frameon=False)
            _plain_text(legend.get_texts())
        fig.tight_layout()
        return _svg(fig, f"flowgauge-{network}-bars", id_prefix)


# curve kind -> (aggregate, x field, y field, x label, y label, title)
_CURVES = {
    "solved": ("solved_curve", "thresholds_pct", "share", "threshold on |restored gap| [%] (log scale)",
               "share of samples solved (higher is better)", "share solved against the gap threshold"),
    "tolerance": ("tolerance_curve", "multiples", "failure_rate", "multiple of the profile's tolerances (log scale)",
                  "restoration failure rate (lower is better)", "failure rate against the tolerances"),
}


def _mean_curve(per_split: dict, splits, kind: str):
    """(x, mean over the splits of y) of an entry's curve, or None when a split lacks it."""
    agg, xf, yf = _CURVES[kind][:3]
    xs, ys = None, []
    for split in splits:
        sc = per_split.get(split)
        curve = (sc.card.get("aggregates") or {}).get(agg) if sc is not None else None
        if not isinstance(curve, dict) or curve.get(yf) is None:
            return None
        xs = curve[xf]
        ys.append(curve[yf])
    return (xs, [sum(v) / len(v) for v in zip(*ys)]) if ys else None


def curves_svg(network: str, entries: dict, calibration: dict, splits: tuple[str, ...], kind: str, *,
               id_prefix: str = "curve") -> str | None:
    """One line per entry (solid) and per calibration row (dashed, grey): the mean over the
    splits of the scorecards' solved-share curve (``kind="solved"``) or tolerance curve
    (``kind="tolerance"``). None when no entry has the curve (format-1 scorecards)."""
    _, _, _, xlabel, ylabel, title = _CURVES[kind]
    lines = []
    for i, name in enumerate(sorted(entries)):
        c = _mean_curve(entries[name], splits, kind)
        if c is not None:
            lines.append((c, _label(name), {"color": _colour(i), "lw": 1.6}))
    for j, name in enumerate(sorted(calibration)):
        c = _mean_curve(calibration[name], splits, kind)
        if c is not None:
            grey = str(0.25 + 0.2 * j)
            lines.append((c, _label(name), {"color": grey, "lw": 1.2, "ls": "--"}))
    if not lines:
        return None
    salt = f"flowgauge-{network}-{kind}"
    with matplotlib.rc_context({**_RC, "svg.hashsalt": salt}):
        fig = Figure(figsize=(_WIDTH_IN, 4.0))
        ax = fig.add_subplot()
        for (xs, ys), label, style in lines:
            ax.plot(xs, ys, marker="o", ms=3, label=label, **style)
        ax.set_xscale("log")
        ax.set_ylim(-0.03, 1.03)
        ax.set_xlabel(xlabel)
        ax.set_ylabel(ylabel)
        ax.set_title(f"{_label(network)}: {title}")
        _plain_text([ax.title])
        ax.grid(True, lw=0.4, alpha=0.5)
        legend = ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.16), ncol=2, frameon=False)
        _plain_text(legend.get_texts())
        fig.tight_layout()
        return _svg(fig, salt, id_prefix)


# limit family -> bar label of the coverage plot
_FAMILY_LABELS = {"voltage": "voltage", "active_power": "active power", "reactive_power": "reactive power",
                  "thermal": "thermal", "angle": "angle"}


def coverage_svg(network: str, splits: list[dict], *, id_prefix: str = "coverage") -> str | None:
    """Coverage of the splits of one network. Left: distinct binding-limit regimes among the
    first n accepted samples against n, one line per split. Right: share of samples with a
    binding limit of each family, one bar per split in each family's group.

    ``splits``: one dict per split, in the order shown: ``name``; ``samples`` and ``regimes``
    (equal-length sequences: sample counts and the distinct regimes among that many samples;
    may be empty); ``family_shares`` (family -> share, or None). None when there is nothing
    to draw."""
    splits = [s for s in splits if len(s["samples"]) or s.get("family_shares")]
    if not splits:
        return None
    salt = f"flowgauge-{network}-coverage"
    with _quiet_glyphs(), matplotlib.rc_context({**_RC, "svg.hashsalt": salt}):
        fig = Figure(figsize=(_WIDTH_IN, 3.9))
        ax, bx = fig.subplots(1, 2, gridspec_kw={"width_ratios": (1.3, 1.0)})
        for i, s in enumerate(splits):
            if len(s["samples"]):
                ax.plot(s["samples"], s["regimes"], color=_colour(i), lw=1.6, label=clean(s["name"]))
        ax.set_xlabel("accepted samples (sample order)")
        ax.set_ylabel("distinct regimes")
        ax.set_ylim(bottom=0)
        ax.grid(True, lw=0.4, alpha=0.5)
        families = list(_FAMILY_LABELS)
        height = 0.8 / len(splits)
        for i, s in enumerate(splits):  # families top to bottom, splits in order within each
            shares = s.get("family_shares") or {}
            ys = [j - 0.4 + height * (i + 0.5) for j in range(len(families))]
            bx.barh(ys, [shares.get(f, math.nan) for f in families], height=height, color=_colour(i),
                    label=clean(s["name"]) if not len(s["samples"]) else None)
        bx.set_yticks(range(len(families)), [_FAMILY_LABELS[f] for f in families])
        bx.invert_yaxis()
        bx.set_xlim(0, 1.02)
        bx.set_xlabel("share of samples binding")
        bx.grid(True, axis="x", lw=0.4, alpha=0.5)
        title = fig.suptitle(f"{_label(network)}: binding-limit regimes of the splits", fontsize=11)
        handles = [h for a in (ax, bx) for h in a.get_legend_handles_labels()[0]]
        labels = [lab for a in (ax, bx) for lab in a.get_legend_handles_labels()[1]]
        legend = fig.legend(handles, labels, loc="lower center", ncol=min(len(labels), 5), frameon=False)
        _plain_text([*legend.get_texts(), title])
        fig.tight_layout(rect=(0, 0.08, 1, 1))
        return _svg(fig, salt, id_prefix)
