"""Matplotlib figures of the HTML report, rendered to deterministic inline SVG.

Every function returns an SVG fragment ready to be placed inside an HTML page:
no XML declaration, no DOCTYPE, no metadata block, no namespace URLs, and element
ids prefixed so that several figures can share one page. Figures are built with
:class:`matplotlib.figure.Figure` directly (no pyplot, no global backend switch),
inside an ``rc_context`` that fixes the SVG hash salt, keeps text as text (so the
browser can search it) and turns off mathtext, so a ``$`` in an action name is shown
as typed. Matplotlib escapes ``<``, ``>`` and ``&`` in SVG text; labels are also
cleaned of control characters and shortened by :func:`clean_label`.
"""

from __future__ import annotations

import contextlib
import io
import math
import re
import warnings
from html import escape

import matplotlib
import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import LinearSegmentedColormap
from matplotlib.figure import Figure

from .._util.text import replace_control_characters

__all__ = [
    "PALETTE",
    "clean_label",
    "svg_boxes",
    "svg_support_bars",
    "svg_residual_heatmap",
    "svg_state_diagram",
    "svg_occupancy",
    "svg_prediction_curves",
]

#: Neutral colours for groups, in group order (then repeated).
PALETTE = ["#3f6e8c", "#b7803a", "#6b8f5e", "#8a5c7a", "#7a7a7a", "#4f8a8b"]
_INK = "#2b2b2b"
_GRID = "#d9d9d9"
_BASELINE = "#8c8c8c"
# Diverging map for adjusted residuals: warm brown (fewer than expected) - white -
# slate blue (more than expected).
_DIVERGING = LinearSegmentedColormap.from_list(
    "seqmine_residuals", ["#8c5a2b", "#e9d8c4", "#ffffff", "#c9d8e6", "#2f5f86"])

_RC = {
    "svg.hashsalt": "seqmine-report",
    "svg.fonttype": "none",
    "text.parse_math": False,
    "text.usetex": False,
    "font.family": "sans-serif",
    "font.sans-serif": ["DejaVu Sans", "Liberation Sans", "Arial"],
    "font.size": 9,
    "axes.edgecolor": "#9a9a9a",
    "axes.labelcolor": _INK,
    "axes.titlesize": 10,
    "axes.titleweight": "bold",
    "axes.spines.top": False,
    "axes.spines.right": False,
    "xtick.color": _INK,
    "ytick.color": _INK,
    "text.color": _INK,
    "legend.frameon": False,
    "path.simplify": False,
}
_METADATA = {"Date": None, "Creator": None, "Format": None, "Type": None}


def clean_label(text, max_chars=48):
    """Printable, bounded label for a figure.

    Control characters become U+FFFD, runs of white space one space, and text
    longer than ``max_chars`` is cut with an ellipsis. Escaping is left to the
    SVG writer (matplotlib) and, for HTML, to :func:`html.escape`.

    Parameters
    ----------
    text : object
        Anything; converted with ``str``.
    max_chars : int, default 48

    Returns
    -------
    str

    Examples
    --------
    >>> clean_label("set_light\\x00 >  advance_week")
    'set_light\\ufffd > advance_week'
    >>> clean_label("x" * 10, max_chars=5)
    'xxxx…'
    """
    s = replace_control_characters(str(text), keep_layout=True)
    s = " ".join(s.split())
    if len(s) > max_chars:
        s = s[: max_chars - 1] + "…"
    return s


def svg_boxes(stats, *, title, xlabel, fig_id):
    """Horizontal box plots from five-number summaries, one box per group.

    Parameters
    ----------
    stats : dict of str to dict
        Group name -> ``{"min", "q1", "median", "q3", "max"}`` (``"n"`` optional,
        shown in the label).
    title, xlabel : str
    fig_id : str
        Prefix for element ids (unique within the page).

    Returns
    -------
    str
        SVG fragment.
    """
    names = list(stats)
    boxes = []
    for name in names:
        s = stats[name]
        label = clean_label(name, 28)
        if s.get("n") is not None:
            label += f" (n={int(s['n'])})"
        boxes.append({"label": label, "whislo": s["min"], "q1": s["q1"], "med": s["median"],
                      "q3": s["q3"], "whishi": s["max"], "fliers": []})
    with _style():
        fig = Figure(figsize=(6.4, 0.6 + 0.45 * len(boxes)))
        ax = fig.subplots()
        art = ax.bxp(boxes[::-1], orientation="horizontal", patch_artist=True, widths=0.55,
                     medianprops={"color": _INK, "linewidth": 1.6})
        for patch, i in zip(art["boxes"], range(len(boxes) - 1, -1, -1)):
            patch.set_facecolor(PALETTE[i % len(PALETTE)])
            patch.set_alpha(0.55)
        _title(fig, title)
        ax.set_xlabel(clean_label(xlabel, 80))
        ax.grid(axis="x", color=_GRID, linewidth=0.6)
        ax.set_axisbelow(True)
        fig.tight_layout()
        return _to_svg(fig, fig_id, title)


def svg_support_bars(patterns, supports, *, fig_id, title="Share of sequences containing the pattern"):
    """Grouped horizontal bars: support of each pattern in each group.

    Parameters
    ----------
    patterns : list of str
        Pattern labels, top to bottom.
    supports : dict of str to sequence of float
        Group name -> support fraction per pattern (NaN drawn as no bar).
    fig_id : str
    title : str

    Returns
    -------
    str
        SVG fragment.
    """
    groups = list(supports)
    n, g = len(patterns), max(len(groups), 1)
    height = 0.8 / g
    with _style():
        fig = Figure(figsize=(7.6, 0.9 + 0.32 * n * max(g, 2) / 2 + 0.2))
        ax = fig.subplots()
        y = np.arange(n)[::-1].astype(float)
        for k, name in enumerate(groups):
            vals = np.asarray(supports[name], dtype=float)
            off = (k - (g - 1) / 2) * height
            vals = np.where(np.isfinite(vals), np.clip(vals, 0.0, 1.0), 0.0)
            ax.barh(y - off, vals, height=height * 0.92,
                    color=PALETTE[k % len(PALETTE)], label=_legend_label(name))
        ax.set_yticks(y, [clean_label(p, 60) for p in patterns])
        ax.set_xlim(0, 1)
        ax.xaxis.set_major_formatter(matplotlib.ticker.PercentFormatter(1.0, decimals=0))
        ax.grid(axis="x", color=_GRID, linewidth=0.6)
        ax.set_axisbelow(True)
        _title(fig, title)
        _legend_above(ax, g)
        fig.tight_layout()
        return _to_svg(fig, fig_id, title)


def svg_residual_heatmap(matrix, rows, cols, *, title, fig_id, counts=None):
    """Heatmap of adjusted residuals (from-token rows, to-token columns).

    Parameters
    ----------
    matrix : ndarray, shape (n_rows, n_cols)
        Adjusted residuals; NaN for transitions not in the table.
    rows, cols : list of str
    title : str
    fig_id : str
    counts : ndarray, optional
        Transition counts printed under each residual.

    Returns
    -------
    str
        SVG fragment.
    """
    m = np.asarray(matrix, dtype=float)
    finite = np.abs(m[np.isfinite(m)])
    lim = max(3.0, float(finite.max()) if finite.size else 3.0)
    lim = min(lim, 10.0)
    n_r, n_c = m.shape
    cell = 0.42
    with _style():
        fig = Figure(figsize=(max(4.0, 2.2 + cell * n_c), max(2.6, 1.6 + cell * n_r)))
        ax = fig.subplots()
        # Vector cells (no embedded raster image); row 0 at the top.
        ax.pcolormesh(np.arange(n_c + 1) - 0.5, np.arange(n_r + 1) - 0.5,
                      np.ma.masked_invalid(np.clip(m, -lim, lim)), cmap=_DIVERGING,
                      vmin=-lim, vmax=lim,
                      edgecolors="#ffffff", linewidth=0.5)
        ax.set_xlim(-0.5, n_c - 0.5)
        ax.set_ylim(n_r - 0.5, -0.5)
        ax.set_facecolor("#f2f2f2")
        for i in range(n_r):
            for j in range(n_c):
                v = m[i, j]
                if not math.isfinite(v):
                    continue
                txt = f"{v:+.1f}" if abs(v) < 1000 else f"{v:+.0e}"
                if counts is not None and math.isfinite(counts[i, j]):
                    txt += f"\n{int(counts[i, j])}"
                ax.text(j, i, txt, ha="center", va="center", fontsize=6.5,
                        color="#ffffff" if abs(v) > 0.6 * lim else _INK)
        ax.set_xticks(range(n_c), [clean_label(c, 24) for c in cols], rotation=55, ha="right",
                      rotation_mode="anchor")
        ax.set_yticks(range(n_r), [clean_label(r, 24) for r in rows])
        ax.set_xlabel("next token")
        ax.set_ylabel("token")
        for side in ("top", "right", "left", "bottom"):
            ax.spines[side].set_visible(False)
        ax.tick_params(length=0)
        _title(fig, title)
        fig.tight_layout()
        return _to_svg(fig, fig_id, title)


def svg_state_diagram(states, transmat, *, title, fig_id, min_prob=0.05):
    """Phase model drawn as a state diagram on a circle.

    Each node is a state with its name, expected dwell and top emissions; arrows are
    transitions between different states with probability at least ``min_prob``
    (width grows with probability, printed beside the arrow).

    Parameters
    ----------
    states : list of dict
        ``{"name": str, "emissions": list of (token, prob), "dwell": float or None}``.
    transmat : ndarray, shape (n_states, n_states)
    title : str
    fig_id : str
    min_prob : float, default 0.05

    Returns
    -------
    str
        SVG fragment.
    """
    import networkx as nx

    n = len(states)
    a = np.asarray(transmat, dtype=float) if transmat is not None else np.full((n, n), np.nan)
    graph = nx.DiGraph()
    graph.add_nodes_from(range(n))
    for i in range(n):
        for j in range(n):
            if i != j and a.shape == (n, n) and math.isfinite(a[i, j]) and a[i, j] >= min_prob:
                graph.add_edge(i, j, p=float(a[i, j]))
    # Fixed circular layout (deterministic; first state at the top, clockwise).
    ang = [math.pi / 2 - 2 * math.pi * k / max(n, 1) for k in range(n)]
    rx, ry = (1.0, 1.0) if n <= 4 else (1.35, 1.0)  # wider than tall: boxes are wide
    if n <= 1:
        rx = ry = 0.0
    pos = {k: (rx * math.cos(t), ry * math.sin(t)) for k, t in enumerate(ang)}
    with _style():
        ys = [xy[1] for xy in pos.values()] or [0.0]
        y_lo, y_hi = min(ys) - 0.5, max(ys) + 0.5
        width = 4.8 if n <= 4 else 7.2
        fig = Figure(figsize=(width, max(2.2, 0.5 + width * (y_hi - y_lo) / (2 * rx + 1.4))))
        FigureCanvasAgg(fig)  # a renderer to measure the node boxes
        ax = fig.subplots()
        nodes = []
        for k, st in enumerate(states):
            lines = [clean_label(st.get("name", f"state {k}"), 28)]
            dwell = st.get("dwell")
            if dwell is not None and math.isfinite(dwell):
                lines.append(f"stays ~{dwell:.1f} steps")
            for tok, prob in list(st.get("emissions", []))[:3]:
                lines.append(f"{clean_label(tok, 24)}  {prob:.0%}")
            color = PALETTE[k % len(PALETTE)]
            nodes.append(ax.text(pos[k][0], pos[k][1], "\n".join(lines), ha="center",
                                 va="center", fontsize=8, linespacing=1.35, zorder=3,
                                 bbox={"boxstyle": "round,pad=0.5", "fc": color + "26",
                                       "ec": color, "lw": 1.2}))
        ax.set_xlim(-rx - 0.7, rx + 0.7)
        ax.set_ylim(y_lo, y_hi)
        ax.set_axis_off()
        _title(fig, title)
        fig.tight_layout()
        fig.canvas.draw()
        renderer = fig.canvas.get_renderer()
        boxes = [t.get_bbox_patch().get_window_extent(renderer) for t in nodes]
        to_pt = 72.0 / fig.dpi
        for i, j, d in sorted(graph.edges(data=True)):
            p = d["p"]
            (x0, y0), (x1, y1) = ax.transData.transform([pos[i], pos[j]])
            dx, dy = x1 - x0, y1 - y0
            length = math.hypot(dx, dy) or 1.0
            shrink = [_edge_distance(boxes[k], dx / length, dy / length) * to_pt + 6
                      for k in (i, j)]
            ax.annotate("", xy=pos[j], xytext=pos[i], zorder=2,
                        arrowprops={"arrowstyle": "-|>", "color": "#5b5b5b",
                                    "lw": 0.6 + 4.0 * p, "shrinkA": shrink[0],
                                    "shrinkB": shrink[1], "mutation_scale": 12,
                                    "connectionstyle": "arc3,rad=0.18"})
            # Label on the arc, a third of the way from the source (so that the two
            # directions between a pair of states get separate labels).
            (x0, y0), (x1, y1) = pos[i], pos[j]
            cx = (x0 + x1) / 2 + 0.18 * (y1 - y0)
            cy = (y0 + y1) / 2 - 0.18 * (x1 - x0)
            t = 0.36
            mx = (1 - t) ** 2 * x0 + 2 * (1 - t) * t * cx + t * t * x1
            my = (1 - t) ** 2 * y0 + 2 * (1 - t) * t * cy + t * t * y1
            ax.text(mx, my, f"{p:.2f}", fontsize=7.5, ha="center", va="center",
                    color="#444444", zorder=4,
                    bbox={"boxstyle": "round,pad=0.15", "fc": "#ffffff", "ec": "none"})
        return _to_svg(fig, fig_id, title)


def svg_occupancy(states, occupancy, *, fig_id, title="Share of time spent in each phase"):
    """Grouped horizontal bars: share of time steps in each state per group.

    Parameters
    ----------
    states : list of str
    occupancy : dict of str to sequence of float
        Group name -> occupancy fraction per state.
    fig_id : str
    title : str

    Returns
    -------
    str
        SVG fragment.
    """
    return svg_support_bars(states, occupancy, fig_id=fig_id, title=title)


def svg_prediction_curves(curves, *, fig_id, baseline=None, chance=None, ylabel, title):
    """Metric against the observed fraction of the sequence, one line per classifier.

    Parameters
    ----------
    curves : dict of str to dict
        Classifier -> ``{"fraction": array, "value": array, "low": array or None,
        "high": array or None}`` (low/high draw a confidence band).
    fig_id : str
    baseline : dict, optional
        ``{"fraction": array, "value": array, "label": str}`` drawn dashed.
    chance : float, optional
        A horizontal dotted reference line (e.g. 0.5 for balanced accuracy).
    ylabel, title : str

    Returns
    -------
    str
        SVG fragment.
    """
    with _style():
        fig = Figure(figsize=(5.2, 3.4))
        ax = fig.subplots()
        for k, (name, c) in enumerate(curves.items()):
            color = PALETTE[k % len(PALETTE)]
            x = _unit(c["fraction"])
            yv = _unit(c["value"])
            if c.get("low") is not None and c.get("high") is not None:
                ax.fill_between(x, _unit(c["low"]), _unit(c["high"]),
                                color=color, alpha=0.18 if len(curves) <= 2 else 0.07,
                                linewidth=0)
            ax.plot(x, yv, marker="o", markersize=3.5, color=color, lw=1.6,
                    label=_legend_label(name))
        if baseline is not None:
            ax.plot(_unit(baseline["fraction"]), _unit(baseline["value"]),
                    ls="--", color=_BASELINE, lw=1.4, label=_legend_label(baseline["label"]))
        if chance is not None:
            ax.axhline(chance, ls=":", color=_BASELINE, lw=1.0, label=f"chance ({chance:g})")
        ax.set_xlim(0, 1.02)
        ax.set_ylim(0, 1.02)
        ax.xaxis.set_major_formatter(matplotlib.ticker.PercentFormatter(1.0, decimals=0))
        ax.set_xlabel("share of the sequence observed")
        ax.set_ylabel(clean_label(ylabel, 40))
        ax.grid(color=_GRID, linewidth=0.6)
        ax.set_axisbelow(True)
        _title(fig, title)
        _legend_above(ax, 2)
        fig.tight_layout()
        return _to_svg(fig, fig_id, title)


# --------------------------------------------------------------------------- helpers


@contextlib.contextmanager
def _style():
    """Fixed style and SVG settings; no warnings about glyphs matplotlib's font lacks.

    Text stays text in the SVG and the browser picks a font that has the glyph, so a
    glyph missing from matplotlib's own font does not matter here.
    """
    with matplotlib.rc_context(_RC), warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=r"Glyph \d+ .*missing from",
                                category=UserWarning)
        # Very long labels: the figure is drawn without the layout adjustment.
        warnings.filterwarnings("ignore", message="Tight layout not applied",
                                category=UserWarning)
        yield


def _title(fig, text):
    """Figure title at the top left (outside the axes, never clipped by long labels)."""
    fig.suptitle(clean_label(text, 80), x=0.01, ha="left", fontsize=10, fontweight="bold")


def _legend_label(name):
    """Legend text: matplotlib hides labels starting with '_' and empty ones."""
    text = clean_label(name, 32) or "(unnamed)"
    return "\u200b" + text if text.startswith("_") else text


def _unit(values):
    """Floats clipped to [0, 1]; infinities become NaN (drawn as gaps)."""
    v = np.asarray(values, dtype=float)
    return np.where(np.isfinite(v), np.clip(v, 0.0, 1.0), np.nan)


def _legend_above(ax, ncol):
    """Legend in a row between the title and the axes, so it never hides data."""
    if not ax.get_legend_handles_labels()[0]:
        return
    ax.legend(loc="lower left", bbox_to_anchor=(0.0, 1.01), ncol=max(1, min(ncol, 4)),
              fontsize=8, borderaxespad=0.2, handlelength=1.6, columnspacing=1.2)


def _edge_distance(box, ux, uy):
    """Distance from a box's centre to its edge along the unit direction (ux, uy)."""
    half_w, half_h = box.width / 2, box.height / 2
    tx = half_w / abs(ux) if ux else math.inf
    ty = half_h / abs(uy) if uy else math.inf
    return min(tx, ty)

_ID_ATTR = re.compile(r'\bid="([^"]*)"')
_URL_REF = re.compile(r"url\(#([^)]*)\)")
_HREF_REF = re.compile(r'xlink:href="#([^"]*)"')


def _to_svg(fig, fig_id, title):
    """Serialise a figure to an inline-ready SVG fragment (deterministic)."""
    buf = io.StringIO()
    fig.savefig(buf, format="svg", metadata=_METADATA)
    svg = buf.getvalue()
    svg = svg[svg.index("<svg"):]
    svg = re.sub(r"\s*<metadata>.*?</metadata>", "", svg, flags=re.S)
    prefix = re.sub(r"[^A-Za-z0-9_-]", "_", fig_id) + "-"

    def fix_tag(m):
        # Only inside tags: matplotlib escapes '<' and '>' in text, so every
        # '<...>' here is markup, never text taken from a log.
        tag = re.sub(r'\s+xmlns(:\w+)?="[^"]*"', "", m.group(0))
        tag = _ID_ATTR.sub(lambda t: f'id="{prefix}{t.group(1)}"', tag)
        tag = _URL_REF.sub(lambda t: f"url(#{prefix}{t.group(1)})", tag)
        return _HREF_REF.sub(lambda t: f'xlink:href="#{prefix}{t.group(1)}"', tag)

    svg = re.sub(r"<[^<>]*>", fix_tag, svg)
    # Matplotlib escapes '<', '>' and '&' in text but leaves quotes; escape them too so
    # that figure text is escaped exactly like html.escape(..., quote=True) would.
    svg = re.sub(r">([^<>]+)<", lambda m: ">" + m.group(1).replace('"', "&quot;")
                 .replace("'", "&#x27;") + "<", svg)
    if re.search(r"<\s*(script|foreignobject|iframe|object|embed)\b", svg, flags=re.I):
        raise RuntimeError("figure SVG contains an active element; refusing to embed it")
    label = escape(clean_label(title, 120), quote=True)
    svg = svg.replace("<svg ", f'<svg role="img" aria-label="{label}" class="fig" ', 1)
    return svg.strip()
