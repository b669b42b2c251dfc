"""The report in headless Chromium: renders, runs only its own script, loads nothing;
the pattern explorer sorts, filters and pages; the page fits 400 px; print is A4."""

import re
from pathlib import Path

import pandas as pd
import pytest
from browser_helper import (
    CHROMIUM,
    SKIP_REASON,
    DevTools,
    check_report_scripts,
    load_page,
    pdf_pages,
    screenshot_ink,
    start_tags,
)
from report_fixture import HOSTILE, write_output_folder

from seqmine.config import default_config
from seqmine.pipeline import analyze
from seqmine.reporting.render import render_report

pytestmark = [pytest.mark.browser, pytest.mark.skipif(CHROMIUM is None, reason=SKIP_REASON)]

TITLE = "seqmine report: behaviour patterns and outcomes"
SECTIONS = ["overview", "patterns", "explorer", "transitions", "phases", "early-prediction",
            "detectors", "method", "cautions"]
DEMO = Path(__file__).resolve().parents[1] / "datasets" / "greenhouse"
#: Printable width of A4 (210 mm) with the report's 12 mm side margins, in CSS px.
PRINT_WIDTH_PX = (210 - 2 * 12) / 25.4 * 96
#: A4 in PDF points (ISO 216: 210 x 297 mm; 1 pt = 1/72 in).
A4_PT = (210 / 25.4 * 72, 297 / 25.4 * 72)


def _title(dom):
    m = re.search(r"<title>(.*?)</title>", dom, flags=re.S)
    return m.group(1) if m else None


def _no_active_markup(dom):
    for tag, attrs in start_tags(dom):
        assert tag not in ("img", "iframe", "object", "embed", "link", "base"), tag
        if tag == "script":
            assert attrs in ({}, {"type": "application/json", "id": "explorer-data"}), attrs
        for k, v in attrs.items():
            assert not k.startswith("on"), (tag, k)
            assert not (v or "").strip().lower().startswith("javascript:"), (tag, k)


def test_positive_controls(tmp_path):
    """The checks below can fail: a script that runs and a page that loads are seen."""
    page = tmp_path / "control.html"
    page.write_text("<!DOCTYPE html><html><head><title>before</title>"
                    "<script>document.title='pwned'</script></head><body>"
                    "<img src='http://canary.invalid/x.png'>"
                    "<script>console.error('boom')</script></body></html>")
    run = load_page(page, tmp_path / "c", screenshot=False)
    assert _title(run.dom) == "pwned"
    with pytest.raises(AssertionError, match="img"):
        _no_active_markup(run.dom)
    assert "http://canary.invalid/x.png" in run.page_requests
    with DevTools(tmp_path / "d") as dt:
        dt.open(page)
        assert any("boom" in e for e in dt.errors)
        assert "http://canary.invalid/x.png" in dt.requests


@pytest.mark.parametrize("hostile", [False, True], ids=["plain", "hostile"])
def test_report_in_chromium(tmp_path, hostile):
    folder = write_output_folder(tmp_path / "out", hostile=hostile)
    path = render_report(folder)
    assert check_report_scripts(path.read_text(encoding="utf-8")) == 1
    run = load_page(path, tmp_path / "browser")
    # Screenshot exists and is not blank.
    assert run.screenshot is not None, run.stderr[-2000:]
    assert run.screenshot.stat().st_size > 20_000
    assert screenshot_ink(run.screenshot) > 0.02
    # The DOM has every section, the title is unchanged (no injected script ran),
    # and no element came from the data.
    assert _title(run.dom) == TITLE
    for sid in SECTIONS:
        assert f'id="{sid}"' in run.dom
    assert "<img" not in run.dom.lower()
    _no_active_markup(run.dom)
    # No request left the machine.
    assert run.page_requests == []
    with DevTools(tmp_path / "dt") as dt:
        dt.open(path)
        assert dt.errors == [] and dt.requests == []
        assert dt.eval("document.title") == TITLE
        cells = dt.eval("Array.from(document.querySelectorAll('#ex-body tr')).map("
                        "r => r.textContent).join('\\n')")
        if hostile:  # log strings are shown as text by the explorer, never run
            assert HOSTILE["script"] in cells and HOSTILE["svg_close"] in cells
            assert dt.eval("document.querySelectorAll('#ex-body img, #ex-body script')"
                           ".length") == 0


def test_escaping_alone_without_csp(tmp_path):
    """Escaping holds even with the Content-Security-Policy removed."""
    folder = write_output_folder(tmp_path / "out", hostile=True)
    text = render_report(folder).read_text(encoding="utf-8")
    text, n = re.subn(r'<meta http-equiv="Content-Security-Policy"[^>]*>\n', "", text)
    assert n == 1
    page = tmp_path / "no_csp.html"
    page.write_text(text, encoding="utf-8")
    run = load_page(page, tmp_path / "browser", screenshot=False)
    assert _title(run.dom) == TITLE
    assert "<img" not in run.dom.lower()
    _no_active_markup(run.dom)
    assert run.page_requests == []


# ----------------------------------------------------------------- the demo report
@pytest.fixture(scope="module")
def demo_report(tmp_path_factory):
    """The report of the shipped greenhouse demo data (fast phase and validation
    settings; every section is produced)."""
    cfg = default_config()
    cfg["phases"].update(max_states=3, n_restarts=1, n_iter=30)
    cfg["validate"].update(n_splits=3, n_repeats=2, n_bootstrap=100, fractions=[0.25, 0.5, 1.0])
    cfg["contrast"]["n_bootstrap"] = 30
    out = tmp_path_factory.mktemp("demo")
    analyze(DEMO / "events.csv", DEMO / "outcomes.csv", out, cfg, quiet=True)
    return out


def _column(dt, label):
    """Index (in the table's data columns) and the header button of a column."""
    return dt.eval(f"""(function () {{
        var b = Array.from(document.querySelectorAll('#explorer-ui thead button'));
        var m = b.filter(function (x) {{ return x.textContent === {label!r}; }})[0];
        return m ? Number(m.getAttribute('data-col')) : null; }})()""")


def _shown(dt, label):
    """Texts of one column in the rows on the current page."""
    return dt.eval(f"""(function () {{
        var heads = Array.from(document.querySelectorAll('#explorer-ui thead th'));
        var k = heads.findIndex(function (h) {{ return h.textContent === {label!r}; }});
        return Array.from(document.querySelectorAll('#ex-body tr')).map(
            function (r) {{ return r.children[k].textContent; }}); }})()""")


def _set(dt, element_id, value):
    dt.eval(f"""(function () {{ var e = document.getElementById({element_id!r});
        if (e.type === 'checkbox') {{ e.checked = {str(bool(value)).lower()}; }}
        else {{ e.value = {str(value)!r}; }}
        e.dispatchEvent(new Event('input')); e.dispatchEvent(new Event('change')); }})()""")


def _count(dt):
    status = dt.eval("document.getElementById('ex-status').textContent")
    m = re.search(r"of (\d+) shown", status)
    return int(m.group(1)) if m else 0 if status.startswith("No pattern") else None


def test_explorer_sorts_filters_and_pages(demo_report, tmp_path):
    table = pd.read_csv(demo_report / "patterns.csv", keep_default_na=False)
    with DevTools(tmp_path) as dt:
        dt.open(demo_report / "report.html", width=1280)
        assert dt.eval("document.getElementById('explorer-fallback').hidden") is True
        assert dt.eval("document.getElementById('explorer-ui').hidden") is False
        assert _count(dt) == len(table)
        # default order: as in patterns.csv
        assert _shown(dt, "#") == [str(i) for i in range(1, 26)]
        first = _shown(dt, "pattern")[0]
        assert first == table["pattern"].iloc[0].replace(" > ", ">")
        # sort by the weak group's support: descending first, then ascending; the
        # reference is pandas on patterns.csv (ties keep the file order)
        dt.eval("document.querySelector('#explorer-ui thead button[data-col=\"%d\"]')"
                ".click()" % _column(dt, "support weak"))
        ref = table.sort_values("support_weak", ascending=False, kind="mergesort")
        assert _shown(dt, "#") == [str(i + 1) for i in ref.index[:25]]
        dt.eval("document.querySelector('#explorer-ui thead button[data-col=\"%d\"]')"
                ".click()" % _column(dt, "support weak"))
        ref = table.sort_values("support_weak", ascending=True, kind="mergesort")
        assert _shown(dt, "#") == [str(i + 1) for i in ref.index[:25]]
        # sort by the pattern text
        dt.eval("document.querySelector('#explorer-ui thead button[data-col=\"%d\"]')"
                ".click()" % _column(dt, "pattern"))
        shown = _shown(dt, "pattern")
        assert shown == sorted(shown, key=str.lower) or len(set(shown)) == len(shown)
        # filters, each checked against pandas on patterns.csv
        _set(dt, "ex-text", "reset")
        assert _count(dt) == table["pattern"].str.contains("reset").sum()
        _set(dt, "ex-favours", "g:1")  # the second group: weak
        sel = table["pattern"].str.contains("reset") & (table["favours"] == "weak")
        assert _count(dt) == sel.sum()
        _set(dt, "ex-length", "2")
        sel &= table["length"] == 2
        assert _count(dt) == sel.sum()
        _set(dt, "ex-text", "")
        _set(dt, "ex-favours", "")
        _set(dt, "ex-length", "")
        _set(dt, "ex-q", "0.01")
        q = pd.to_numeric(table["q_value"], errors="coerce")
        assert _count(dt) == (q <= 0.01).sum()
        _set(dt, "ex-favours", "none")
        assert _count(dt) == ((q <= 0.01) & (table["favours"] == "")).sum()
        if dt.eval("!!document.getElementById('ex-evidence')"):
            _set(dt, "ex-favours", "")
            _set(dt, "ex-evidence", "order")
            assert _count(dt) == ((q <= 0.01) & (table["evidence"] == "order")).sum()
            _set(dt, "ex-evidence", "")
        _set(dt, "ex-favours", "")
        _set(dt, "ex-q", "")
        _set(dt, "ex-distinct", True)
        assert _count(dt) == (table["redundant_of"] == "").sum()
        _set(dt, "ex-distinct", False)
        # paging and page size
        dt.eval("document.querySelector('#explorer-ui thead button[data-col=\"0\"]').click()")
        dt.eval("document.getElementById('ex-next').click()")
        assert _shown(dt, "#")[0] == "26"
        _set(dt, "ex-size", "100")
        assert len(_shown(dt, "#")) == 100 and _shown(dt, "#")[0] == "1"
        assert dt.eval("document.getElementById('ex-prev').disabled") is True
        assert dt.errors == [] and dt.requests == []


def test_without_scripts_the_top_findings_and_the_csv_link_remain(demo_report, tmp_path):
    with DevTools(tmp_path) as dt:
        dt.open(demo_report / "report.html", scripts=False)
        assert dt.eval("document.getElementById('ex-status').textContent") == ""
        state = dt.eval("""[document.getElementById('explorer-fallback').hidden,
            document.getElementById('explorer-ui').hidden,
            document.querySelectorAll('#ex-body tr').length,
            document.querySelectorAll('section.sec-patterns article.card').length,
            Array.from(document.querySelectorAll('#explorer-fallback a')).map(
                function (a) { return a.getAttribute('href'); })]""")
    assert state[:3] == [False, True, 0]
    assert state[3] >= 5
    assert "patterns.csv" in state[4]


def _overflow(dt, width):
    """Elements (outside scroll boxes) reaching past ``width`` px."""
    return dt.eval(f"""Array.from(document.querySelectorAll('body *')).filter(function (e) {{
        return e.getBoundingClientRect().right > {width} + 0.5
            && !e.closest('.tablebox, .figbox, pre'); }}).map(function (e) {{
        return e.tagName + '.' + e.className; }}).slice(0, 10)""")


def test_at_400_px_the_page_fits_and_figures_stay_legible(demo_report, tmp_path):
    with DevTools(tmp_path) as dt:
        dt.open(demo_report / "report.html", width=400, height=800)
        assert dt.eval("document.documentElement.scrollWidth") <= 400
        assert _overflow(dt, 400) == []
        # every figure keeps at least 3/4 of its drawn size (9 pt text stays >= 9 px)
        scales = dt.eval("""Array.from(document.querySelectorAll('svg.fig')).map(function (s) {
            return s.getBoundingClientRect().width / (parseFloat(s.getAttribute('width'))
                                                      * 4 / 3); })""")
        assert scales and min(scales) >= 0.74, scales
        # the smallest text in any figure, as rendered
        smallest = dt.eval("""Math.min.apply(null, Array.from(
            document.querySelectorAll('svg.fig text')).map(function (t) {
                var s = t.closest('svg'), k = s.getBoundingClientRect().width /
                    s.viewBox.baseVal.width;
                return parseFloat(getComputedStyle(t).fontSize) * k; }))""")
        assert smallest >= 6, smallest
        # wide tables and figures scroll inside their own box
        boxes = dt.eval("""Array.from(document.querySelectorAll('.tablebox, .figbox')).filter(
            function (b) { return b.scrollWidth > b.clientWidth + 1; }).length""")
        assert boxes >= 1
        dt.screenshot(tmp_path / "narrow.png")
        assert dt.errors == [] and dt.requests == []


def test_print_is_a4_and_nothing_is_wider_than_the_page(demo_report, tmp_path):
    with DevTools(tmp_path) as dt:
        dt.open(demo_report / "report.html", width=round(PRINT_WIDTH_PX), height=1100,
                media="print")
        width = round(PRINT_WIDTH_PX)
        assert dt.eval("document.documentElement.scrollWidth") <= width
        assert dt.eval("""Array.from(document.querySelectorAll('body *')).filter(function (e) {
            return e.getBoundingClientRect().right > %d + 0.5; }).length""" % width) == 0
        # a new page before every section, the explorer's controls left out
        assert set(dt.eval("Array.from(document.querySelectorAll('h2')).map(function (h) {"
                           "return getComputedStyle(h).breakBefore; })")) == {"page"}
        assert dt.eval("getComputedStyle(document.getElementById('explorer-ui')).display") \
            == "none"
        pdf = dt.pdf(tmp_path / "report.pdf")
    pages = pdf_pages(pdf)
    assert 9 <= len(pages) <= 60
    for w, h in pages:
        assert abs(w - A4_PT[0]) < 1.5 and abs(h - A4_PT[1]) < 1.5, (w, h)


def test_one_vocabulary_readable_labels_and_one_pattern_notation(demo_report, tmp_path):
    # Every word the page shows (tokens, code, file names, hint texts and phase names
    # taken from the data aside) is a readable label, never a raw key such as
    # n_learners; patterns are written with ' > ' as in the files.
    scan = r"""(function () {
      var out = [], w = document.createTreeWalker(document.querySelector('main'),
                                                  NodeFilter.SHOW_TEXT), n;
      while ((n = w.nextNode())) {
        var p = n.parentElement;
        if (p.closest('.tok, code, pre, script, svg, blockquote.hint, option, ' +
                      '.sec-phases td')) { continue; }
        var m = n.textContent.match(/\b[A-Za-z]+_[A-Za-z_]+\b/g);
        if (m) { out.push(p.tagName + ': ' + m.join(', ')); }
      }
      return out; })()"""
    with DevTools(tmp_path) as dt:
        dt.open(demo_report / "report.html")
        dt.eval("document.querySelectorAll('details').forEach(function (d) { d.open = true; })")
        assert dt.eval(scan) == []
        text = dt.eval("document.querySelector('main').innerText")
    assert "→" not in text
    assert "Cohen's h" in text and "cohens h" not in text.lower().replace("cohen's h", "")
    table = pd.read_csv(demo_report / "patterns.csv", keep_default_na=False)
    assert table["pattern"].iloc[0] in text.replace("\n", "")


def test_explorer_filters_by_evidence_and_sorts_the_volume_adjusted_q(tmp_path):
    import numpy as np

    folder = write_output_folder(tmp_path / "out")
    pat = pd.read_csv(folder / "patterns.csv", dtype=str, keep_default_na=False)
    n = len(pat)
    pat["q_volume"] = np.round(np.linspace(0.5, 0.001, n), 4)
    pat["evidence"] = (["order", "presence", "volume", ""] * n)[:n]
    pat.to_csv(folder / "patterns.csv", index=False)
    path = render_report(folder)
    with DevTools(tmp_path / "dt") as dt:
        dt.open(path)
        for kind in ("order", "presence", "volume", "none"):
            _set(dt, "ex-evidence", kind)
            want = (pat["evidence"] == ("" if kind == "none" else kind)).sum()
            assert _count(dt) == want, kind
        _set(dt, "ex-evidence", "")
        dt.eval("document.querySelector('#explorer-ui thead button[data-col=\"%d\"]')"
                ".click()" % _column(dt, "q (volume-adjusted)"))
        ref = pat.assign(q=pat["q_volume"].astype(float)).sort_values("q", kind="mergesort")
        assert _shown(dt, "#") == [str(i + 1) for i in ref.index[:25]]
        assert dt.errors == [] and dt.requests == []
