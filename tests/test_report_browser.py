"""The report in headless Chromium: renders, runs no injected script, loads nothing."""

import re

import pytest
from browser_helper import CHROMIUM, SKIP_REASON, load_page, screenshot_ink, start_tags
from report_fixture import write_output_folder

from seqmine.reporting.render import render_report

pytestmark = [pytest.mark.browser, pytest.mark.skipif(CHROMIUM is None, reason=SKIP_REASON)]

TITLE = "seqmine report: behaviour patterns and outcomes"
SECTIONS = ["overview", "patterns", "transitions", "phases", "early-prediction", "detectors",
            "method", "cautions"]


def _title(dom):
    m = re.search(r"<title>(.*?)</title>", dom, flags=re.S)
    return m.group(1) if m else None


def _no_active_markup(dom):
    for tag, attrs in start_tags(dom):
        assert tag not in ("script", "img", "iframe", "object", "embed", "link", "base"), tag
        for k, v in attrs.items():
            assert not k.startswith("on"), (tag, k)
            assert not (v or "").strip().lower().startswith("javascript:"), (tag, k)


def test_positive_controls(tmp_path):
    """The checks below can fail: a script that runs and a page that loads are seen."""
    page = tmp_path / "control.html"
    page.write_text("<!DOCTYPE html><html><head><title>before</title>"
                    "<script>document.title='pwned'</script></head><body>"
                    "<img src='http://canary.invalid/x.png'></body></html>")
    run = load_page(page, tmp_path / "c", screenshot=False)
    assert _title(run.dom) == "pwned"
    with pytest.raises(AssertionError, match="script"):
        _no_active_markup(run.dom)
    assert "http://canary.invalid/x.png" in run.page_requests


@pytest.mark.parametrize("hostile", [False, True], ids=["plain", "hostile"])
def test_report_in_chromium(tmp_path, hostile):
    folder = write_output_folder(tmp_path / "out", hostile=hostile)
    path = render_report(folder)
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
    assert "<script" not in run.dom.lower() and "<img" not in run.dom.lower()
    _no_active_markup(run.dom)
    # No request left the machine.
    assert run.page_requests == []


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
    assert "<script" not in run.dom.lower() and "<img" not in run.dom.lower()
    _no_active_markup(run.dom)
    assert run.page_requests == []
