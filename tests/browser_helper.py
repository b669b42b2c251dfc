"""Headless Chromium for tests: screenshot, DOM dump and the page's network requests.

Usage in a test::

    from browser_helper import CHROMIUM, SKIP_REASON, load_page
    pytestmark = pytest.mark.skipif(CHROMIUM is None, reason=SKIP_REASON)
    run = load_page(path_to_html, tmp_path, screenshot=True)
    run.dom, run.screenshot, run.page_requests

Chromium itself contacts a few of its own services even with background networking
switched off; those requests carry the initiator ``"not an origin"`` in the network
log. Requests made *by the page* carry the page's origin (``"null"`` for a file://
page) and are the ones reported in ``page_requests``.
"""

import html.parser
import json
import shutil
import subprocess
from dataclasses import dataclass, field
from pathlib import Path

__all__ = ["CHROMIUM", "SKIP_REASON", "ChromiumRun", "load_page", "page_requests",
           "screenshot_ink", "start_tags"]

CHROMIUM = next((p for p in map(shutil.which, ("chromium", "chromium-browser")) if p), None)
SKIP_REASON = ("headless Chromium not found (Debian package 'chromium'; install with "
               "'apt-get install -y chromium' to run the browser tests)")

_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
          "--disable-background-networking", "--disable-component-update", "--disable-sync",
          "--disable-extensions", "--disable-default-apps", "--no-pings",
          "--disable-dev-shm-usage", "--hide-scrollbars"]
_LOCAL_SCHEMES = ("file:", "data:", "about:", "chrome:", "chrome-error:", "blob:")


@dataclass
class ChromiumRun:
    """What one page load produced."""

    dom: str = ""
    screenshot: Path | None = None
    page_requests: list = field(default_factory=list)
    stderr: str = ""


def load_page(html_path, work_dir, *, screenshot=True, window=(1280, 4000), timeout=120):
    """Open ``html_path`` via file:// twice: once for a screenshot, once to dump the DOM.

    Both runs record a network log; ``page_requests`` merges the page's requests of both.
    """
    if CHROMIUM is None:
        raise RuntimeError(SKIP_REASON)
    work = Path(work_dir)
    work.mkdir(parents=True, exist_ok=True)
    url = Path(html_path).resolve().as_uri()
    run = ChromiumRun()
    jobs = [("dom", ["--dump-dom"])]
    if screenshot:
        shot = work / "screenshot.png"
        jobs.append(("shot", [f"--screenshot={shot}", f"--window-size={window[0]},{window[1]}"]))
    for name, extra in jobs:
        netlog = work / f"netlog-{name}.json"
        profile = work / f"profile-{name}"
        cmd = [CHROMIUM, *_FLAGS, f"--user-data-dir={profile}", f"--log-net-log={netlog}",
               *extra, url]
        proc = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout,
                              stdin=subprocess.DEVNULL)
        run.stderr += proc.stderr
        if name == "dom":
            run.dom = proc.stdout
        else:
            run.screenshot = shot if shot.is_file() else None
        run.page_requests += page_requests(netlog)
    return run


def page_requests(netlog_path):
    """URLs (other than file:, data: and the like) requested by the page itself."""
    path = Path(netlog_path)
    if not path.is_file():
        raise AssertionError(f"Chromium wrote no network log at {path}")
    text = path.read_text(encoding="utf-8", errors="replace").rstrip()
    if not text.endswith("}"):  # the log may end without its closing brackets
        text = text.rstrip(",") + "]}"
    log = json.loads(text)
    names = {v: k for k, v in log["constants"]["logEventTypes"].items()}
    urls = []
    for ev in log.get("events", []):
        if names.get(ev.get("type")) != "URL_REQUEST_START_JOB":
            continue
        params = ev.get("params") or {}
        url = str(params.get("url", ""))
        if not url or url.startswith(_LOCAL_SCHEMES):  # end-of-job events carry no url
            continue
        if params.get("initiator") == "not an origin":  # the browser's own services
            continue
        urls.append(url)
    return urls


def screenshot_ink(png_path):
    """Share of pixels that differ clearly from the page background (0..1)."""
    import numpy as np
    from matplotlib.image import imread

    img = imread(png_path)[..., :3]
    background = np.median(img.reshape(-1, 3), axis=0)
    return float((np.abs(img - background).max(axis=2) > 0.08).mean())


def start_tags(markup):
    """(tag, {attribute: value}) of every start tag in an HTML text, in order."""

    class _Tags(html.parser.HTMLParser):
        def __init__(self):
            super().__init__(convert_charrefs=True)
            self.found = []

        def handle_starttag(self, tag, attrs):
            self.found.append((tag, dict(attrs)))

    parser = _Tags()
    parser.feed(markup)
    parser.close()
    return parser.found
