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
           "screenshot_ink", "start_tags", "DevTools", "pdf_pages", "check_report_scripts"]

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


def check_report_scripts(markup):
    """The report's only scripts: the explorer's JSON data block and one script whose
    SHA-256 hash the Content-Security-Policy names (raises AssertionError otherwise).

    Returns the number of scripts that may run (0 or 1)."""
    import base64
    import hashlib
    import re
    m = re.search(r'http-equiv="Content-Security-Policy" content="([^"]*)"', markup)
    assert m, "the page has no Content-Security-Policy"
    csp = m.group(1)
    assert "default-src 'none'" in csp
    directives = dict((d.strip().split(" ", 1) + [""])[:2] for d in csp.split(";") if d.strip())
    sources = directives.get("script-src", "").split()
    assert all(re.fullmatch(r"'sha256-[A-Za-z0-9+/=]+'", x) for x in sources), sources
    allowed = {x[len("'sha256-"):-1] for x in sources}
    runnable = 0
    for attrs, body in re.findall(r"<script([^>]*)>(.*?)</script>", markup, flags=re.S):
        if attrs == ' type="application/json" id="explorer-data"':
            continue
        assert attrs == "", f"unexpected script element <script{attrs}>"
        digest = base64.b64encode(hashlib.sha256(body.encode("utf-8")).digest()).decode()
        assert digest in allowed, "a script that the policy does not allow"
        runnable += 1
    assert markup.lower().count("<script") == len(re.findall(r"<script[^>]*>.*?</script>",
                                                             markup, flags=re.S))
    assert runnable <= 1
    return runnable


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


# --------------------------------------------------------------------- DevTools
class DevTools:
    """Headless Chromium driven over the DevTools protocol through a pipe (no sockets).

    Chromium started with ``--remote-debugging-pipe`` reads JSON commands, each ended by
    a NUL byte, from file descriptor 3 and writes replies and events to descriptor 4.
    One page is opened; its console errors, uncaught exceptions, log entries (the
    Content-Security-Policy reports its violations there) and network requests are
    collected while it runs.

    Usage::

        with DevTools(work_dir) as dt:
            dt.open(path, width=400)
            dt.eval("document.title")
            dt.errors, dt.requests
    """

    def __init__(self, work_dir, *, timeout=60):
        import fcntl
        import os
        if CHROMIUM is None:
            raise RuntimeError(SKIP_REASON)
        self.timeout = timeout
        self.events, self.errors, self.requests = [], [], []
        self._buf = b""
        self._next = 0
        self._session = None
        to_child_r, self._to_child = os.pipe()
        self._from_child, from_child_w = os.pipe()
        # move the child's ends above 10 so the dup2 onto 3 and 4 cannot clobber them
        hi_r = fcntl.fcntl(to_child_r, fcntl.F_DUPFD, 10)
        hi_w = fcntl.fcntl(from_child_w, fcntl.F_DUPFD, 10)
        os.close(to_child_r)
        os.close(from_child_w)

        def _child_fds():
            os.dup2(hi_r, 3)
            os.dup2(hi_w, 4)

        profile = Path(work_dir) / "profile-devtools"
        self.proc = subprocess.Popen(
            [CHROMIUM, *_FLAGS, "--remote-debugging-pipe", f"--user-data-dir={profile}",
             "about:blank"],
            stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
            pass_fds=(3, 4), preexec_fn=_child_fds)
        os.close(hi_r)
        os.close(hi_w)

    # -- protocol
    def _send(self, method, params=None, session=True):
        import os
        self._next += 1
        msg = {"id": self._next, "method": method, "params": params or {}}
        if session and self._session:
            msg["sessionId"] = self._session
        os.write(self._to_child, json.dumps(msg).encode() + b"\0")
        return self._next

    def _read(self, deadline):
        import os
        import select
        import time
        while b"\0" not in self._buf:
            left = deadline - time.monotonic()
            if left <= 0:
                raise TimeoutError("Chromium did not answer in time")
            ready, _, _ = select.select([self._from_child], [], [], left)
            if ready:
                chunk = os.read(self._from_child, 1 << 20)
                if not chunk:
                    raise RuntimeError("Chromium closed the DevTools pipe")
                self._buf += chunk
        raw, self._buf = self._buf.split(b"\0", 1)
        msg = json.loads(raw)
        if "method" in msg:
            self._note(msg)
        return msg

    def _note(self, msg):
        m, p = msg["method"], msg.get("params") or {}
        self.events.append(m)
        if m == "Runtime.exceptionThrown":
            d = p.get("exceptionDetails") or {}
            self.errors.append("exception: " + str((d.get("exception") or {}).get(
                "description") or d.get("text")))
        elif m == "Runtime.consoleAPICalled" and p.get("type") in ("error", "assert"):
            self.errors.append("console: " + " ".join(str(a.get("value", a.get("description")))
                                                      for a in p.get("args", [])))
        elif m == "Log.entryAdded" and (p.get("entry") or {}).get("level") == "error":
            self.errors.append("log: " + str(p["entry"].get("text")))
        elif m == "Network.requestWillBeSent":
            url = str((p.get("request") or {}).get("url", ""))
            if url and not url.startswith(_LOCAL_SCHEMES):
                self.requests.append(url)

    def call(self, method, params=None, *, session=True):
        """Send a command and return its result (raises on a protocol error)."""
        import time
        mid = self._send(method, params, session)
        deadline = time.monotonic() + self.timeout
        while True:
            msg = self._read(deadline)
            if msg.get("id") == mid:
                if "error" in msg:
                    raise RuntimeError(f"{method}: {msg['error']}")
                return msg.get("result", {})

    def wait_for(self, method):
        """Block until the event ``method`` arrives (events already seen count)."""
        import time
        deadline = time.monotonic() + self.timeout
        while method not in self.events:
            self._read(deadline)

    # -- page
    def open(self, html_path, *, width=1280, height=900, media=None, scripts=True):
        """Open a file at the given viewport (print media, scripts off if asked); wait
        until it has loaded."""
        if self._session is None:
            target = self.call("Target.createTarget", {"url": "about:blank"}, session=False)
            self._session = self.call("Target.attachToTarget", {
                "targetId": target["targetId"], "flatten": True}, session=False)["sessionId"]
            for domain in ("Runtime", "Log", "Network", "Page"):
                self.call(f"{domain}.enable")
        self.resize(width, height)
        if media:
            self.call("Emulation.setEmulatedMedia", {"media": media})
        self.call("Emulation.setScriptExecutionDisabled", {"value": not scripts})
        self.events.clear()
        self.call("Page.navigate", {"url": Path(html_path).resolve().as_uri()})
        self.wait_for("Page.loadEventFired")
        return self

    def resize(self, width, height=900):
        self.call("Emulation.setDeviceMetricsOverride", {
            "width": int(width), "height": int(height), "deviceScaleFactor": 1,
            "mobile": False})

    def eval(self, expression):
        """Value of a JavaScript expression in the page (promises awaited)."""
        res = self.call("Runtime.evaluate", {"expression": expression, "returnByValue": True,
                                             "awaitPromise": True})
        if "exceptionDetails" in res:
            raise RuntimeError(f"{expression[:80]}: {res['exceptionDetails'].get('text')}")
        return res.get("result", {}).get("value")

    def pdf(self, path, **params):
        """Print the page to a PDF file (A4 unless the page's CSS sets the size)."""
        import base64
        opts = {"printBackground": True, "preferCSSPageSize": True, "paperWidth": 8.27,
                "paperHeight": 11.69}
        opts.update(params)
        data = self.call("Page.printToPDF", opts)["data"]
        Path(path).write_bytes(base64.b64decode(data))
        return Path(path)

    def screenshot(self, path, *, full_page=False, clip=None):
        """PNG of the viewport, of the whole page, or of a clip {x, y, width, height}."""
        import base64
        params = {"format": "png"}
        if full_page or clip:
            if clip is None:
                size = self.eval("[document.documentElement.scrollWidth, "
                                 "document.documentElement.scrollHeight]")
                clip = {"x": 0, "y": 0, "width": size[0], "height": size[1]}
            params.update(clip=dict(clip, scale=1), captureBeyondViewport=True)
        data = self.call("Page.captureScreenshot", params)["data"]
        Path(path).write_bytes(base64.b64decode(data))
        return Path(path)

    def close(self):
        import os
        try:
            self.call("Browser.close", session=False)
        except Exception:  # noqa: BLE001 - the browser may already be gone
            pass
        for fd in (self._to_child, self._from_child):
            try:
                os.close(fd)
            except OSError:
                pass
        try:
            self.proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


def pdf_pages(path):
    """(width, height) in points of every page of a PDF written by Chromium."""
    import re
    data = Path(path).read_bytes()
    boxes = re.findall(rb"/MediaBox\s*\[\s*([-\d.]+)\s+([-\d.]+)\s+([-\d.]+)\s+([-\d.]+)\s*\]",
                       data)
    return [(float(x1) - float(x0), float(y1) - float(y0)) for x0, y0, x1, y1 in boxes]
