"""Property tests: any text from a log stays text in the report's HTML and SVG."""

import html
import re

import numpy as np
import pandas as pd
from browser_helper import start_tags
from hypothesis import given, settings
from hypothesis import strategies as st

from seqmine._util.text import replace_control_characters
from seqmine.reporting import pieces as sec
from seqmine.reporting import plots as _plots

# Text with the characters that matter for markup, plus anything else.
_MARKUP = st.sampled_from(["<", ">", "&", '"', "'", "/", "=", "$", "\\", "\x00", "\x1b",
                           "\n", "script", "svg", "javascript:", "on", " > ", "pause:"])
TEXT = st.lists(st.one_of(_MARKUP, st.text(min_size=1, max_size=6)), min_size=1,
                max_size=8).map("".join)

_ALLOWED_TAGS = {"article", "h3", "span", "p", "div", "b", "small", "table", "thead", "tbody",
                 "tr", "th", "td", "code", "blockquote"}


_plots_tags = {"svg", "g", "path", "text", "defs", "clippath", "rect", "use", "style",
               "tspan", "polyline", "line", "circle", "ellipse"}
_STYLE = re.compile(r"(width:\d+(\.\d+)?%;)?background:#[0-9a-f]{6}")


def _check_inert(markup, allowed):
    """Only our own tags, only class/style attributes, styles only of our own form."""
    for tag, attrs in start_tags(markup):
        assert tag in allowed, tag
        assert set(attrs) <= {"class", "style"}, (tag, attrs)
        if "style" in attrs:
            assert _STYLE.fullmatch(attrs["style"]), attrs["style"]
        assert attrs.get("class", "") in {"", "card", "rank", "tok", "tok pause", "arrow",
                                          "bars", "bar", "stats", "stats evidence", "note", "excerpt", "who",
                                          "flow", "ev", "ev hit", "gap", "swatch", "num",
                                          "hint", "badge enc", "badge dis", "badge none"}, attrs


@settings(max_examples=40, deadline=None)
@given(tokens=st.lists(TEXT, min_size=1, max_size=4), group=TEXT, learner=TEXT, hint=TEXT)
def test_html_pieces_keep_text_as_text(tokens, group, learner, hint):
    groups = [group, "other"]
    row = pd.Series({"pattern": " > ".join(tokens), "favours": group, "q_value": 0.01,
                     f"support_{group}": 0.5, "support_other": 0.1})
    excerpt = {"learner": learner, "group": group,
               "events": [{"time": float(i), "token": t, "matched": bool(i % 2), "pause": 3.0}
                          for i, t in enumerate(tokens)]}
    card = sec._pattern_card(1, row, [(group, f"support_{group}"), ("other", "support_other")],
                             groups, 0.05, [excerpt], True, 2)
    det = sec._detector_card(0, {"id": learner, "pattern": tokens, "direction": group,
                                 "hint": hint, "priority": hint,
                                 "evidence": {group: hint, "q_value": 0.01}}, groups)
    for markup in (card, det):
        _check_inert(markup, _ALLOWED_TAGS)
    # The visible text of a chip is exactly the (cleaned) token.
    for t in tokens:
        cleaned = replace_control_characters(t, keep_layout=True)[:119]
        assert html.escape(cleaned, quote=True) in card


@settings(max_examples=8, deadline=None)
@given(labels=st.lists(TEXT, min_size=1, max_size=3, unique=True), group=TEXT)
def test_svg_figures_keep_text_as_text(labels, group):
    svg = _plots.svg_support_bars(labels, {group: np.linspace(0.1, 0.9, len(labels))},
                                  fig_id="p")
    tags = start_tags(svg)
    assert {t for t, _ in tags} <= _plots_tags, {t for t, _ in tags}
    assert all(not k.startswith("on") for _, a in tags for k in a)
    assert "<script" not in svg.lower() and "http" not in svg
    for lab in labels:
        shown = _plots.clean_label(lab, 60)
        assert html.escape(shown, quote=True) in svg or "…" in shown
