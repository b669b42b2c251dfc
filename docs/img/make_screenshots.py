"""Make the screenshots of docs/report.md from a demo report (headless Chromium).

    python docs/img/make_screenshots.py OUT_DIR     # OUT_DIR from 'seqmine demo --out OUT_DIR'

Needs the Debian package ``chromium``. Writes the PNG files next to this script.
"""

import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parents[1] / "tests"))

from browser_helper import DevTools  # noqa: E402


def _box(dt, selector, *, pad=8, max_height=900, upto=None):
    """Page coordinates of an element (to the top of ``upto`` when given)."""
    r = dt.eval(f"""(function () {{
        var e = document.querySelector({selector!r});
        var b = e.getBoundingClientRect(), y = b.top + window.scrollY;
        var end = {('document.querySelector(' + repr(upto) + ').getBoundingClientRect().top'
                    if upto else 'b.bottom')} + window.scrollY;
        return [b.left, y, b.width, end - y]; }})()""")
    x, y, w, h = r
    return {"x": max(0, x - pad), "y": max(0, y - pad), "width": w + 2 * pad,
            "height": min(h + 2 * pad, max_height)}


def main(out_dir):
    report = Path(out_dir) / "report.html"
    with tempfile.TemporaryDirectory() as work, DevTools(work) as dt:
        dt.open(report, width=1000, height=900)
        dt.screenshot(HERE / "report-top.png", clip=_box(dt, "header#top", max_height=920))
        # the explorer with two filters set
        dt.eval("""(function () {
            var t = document.getElementById('ex-text'); t.value = 'reset';
            t.dispatchEvent(new Event('input'));
            var f = document.getElementById('ex-favours'); f.value = 'g:1';
            f.dispatchEvent(new Event('change')); })()""")
        dt.screenshot(HERE / "report-explorer.png",
                      clip=_box(dt, "section.sec-explorer", max_height=620))
        dt.screenshot(HERE / "report-phases.png",
                      clip=_box(dt, "section.sec-phases .grid1 > div:nth-child(2)", max_height=760))
        dt.screenshot(HERE / "report-prediction.png",
                      clip=_box(dt, "section.sec-early-prediction", max_height=700))
        dt.screenshot(HERE / "report-detector.png",
                      clip=_box(dt, "section.sec-detectors article.card:has(.badge.enc)",
                                max_height=700))
        dt.resize(400, 800)
        dt.eval("window.scrollTo(0, 0)")
        dt.screenshot(HERE / "report-narrow.png", clip={"x": 0, "y": 0, "width": 400,
                                                        "height": 760})
    for p in sorted(HERE.glob("report-*.png")):
        _shrink(p)
        print(f"{p.name}: {p.stat().st_size // 1024} KB")


def _shrink(path, colors=128):
    """Re-save with a palette of ``colors`` (Pillow, which matplotlib installs): about a
    third of the size, no visible change for a page of text and flat colours."""
    from PIL import Image

    img = Image.open(path).convert("RGB")
    img.quantize(colors=colors, method=Image.Quantize.MEDIANCUT,
                 dither=Image.Dither.NONE).save(path, format="PNG", optimize=True)


if __name__ == "__main__":
    main(sys.argv[1])
