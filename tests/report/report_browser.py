"""Open report pages in a real headless Chromium (Debian's chromium package).

Used by the browser tests, and runnable to refresh the README's pictures:

    python tests/report/report_browser.py OUT docs/images

Network access is cut off twice over: the page's own Content-Security-Policy, and a
host resolver that resolves nothing, so a page that needed the network would fail.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
import tempfile
from html.parser import HTMLParser
from pathlib import Path

CHROMIUM_CANDIDATES = ("/usr/bin/chromium", "chromium", "chromium-browser")
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--disable-extensions", "--hide-scrollbars", "--host-resolver-rules=MAP * ~NOTFOUND",
         "--enable-logging=stderr", "--v=0", "--virtual-time-budget=20000"]


def chromium() -> str | None:
    for c in CHROMIUM_CANDIDATES:
        found = shutil.which(c)
        if found:
            return found
    return None


def _run(page: Path, *extra: str, timeout: float = 120) -> subprocess.CompletedProcess:
    exe = chromium()
    if exe is None:
        raise FileNotFoundError("chromium is not installed; run .ci/install_chromium.sh "
                                "(installs Debian's chromium package)")
    with tempfile.TemporaryDirectory(prefix="sw-chromium-") as profile:
        try:
            return subprocess.run([exe, *FLAGS, f"--user-data-dir={profile}", *extra,
                                   page.resolve().as_uri()],
                                  capture_output=True, text=True, timeout=timeout)
        except subprocess.TimeoutExpired:
            raise RuntimeError(f"chromium did not finish {page.name} within {timeout:.0f} s "
                               "(a script dialog such as alert() blocks headless pages)") from None


def dump_dom(page: Path) -> tuple[str, list[str]]:
    """The DOM after scripts ran, and the page's console lines (any level)."""
    proc = _run(page, "--dump-dom")
    console = [line for line in proc.stderr.splitlines()
               if ":CONSOLE" in line or "Uncaught" in line]
    return proc.stdout, console


def screenshot(page: Path, png: Path, width: int = 1280, height: int = 2000) -> Path:
    png.parent.mkdir(parents=True, exist_ok=True)
    _run(page, f"--screenshot={png.resolve()}", f"--window-size={width},{height}")
    if not png.is_file():
        raise RuntimeError(f"chromium wrote no screenshot to {png}")
    return png


class DomSummary(HTMLParser):
    """Per chart container: how many <svg>/<canvas> it holds and its render state;
    every <script> element's text; the text of <h1> and of SVG <text> elements."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.charts: dict[str, dict] = {}
        self.scripts: list[str] = []
        self.script_types: list[str] = []
        self.h1: list[str] = []
        self.svg_text: list[str] = []
        self._stack: list[tuple[str, str | None]] = []  # (tag, chart id it opens)
        self._chart: list[str] = []
        self._in: str | None = None

    VOID = {"meta", "link", "br", "img", "input", "hr", "source", "wbr", "area", "col"}

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        opens = None
        if tag == "div" and "chart" in (a.get("class") or "").split():
            opens = a.get("id", f"chart-{len(self.charts)}")
            self.charts[opens] = {"svg": 0, "canvas": 0, "rendered": a.get("data-rendered")}
            self._chart.append(opens)
        elif tag in ("svg", "canvas") and self._chart:
            self.charts[self._chart[-1]][tag] += 1
        if tag in ("script", "h1", "text"):
            self._in = tag
            if tag == "script":
                self.scripts.append("")
                self.script_types.append(a.get("type") or "text/javascript")
            elif tag == "h1":
                self.h1.append("")
            else:
                self.svg_text.append("")
        if tag not in self.VOID:
            self._stack.append((tag, opens))

    def handle_endtag(self, tag):
        while self._stack:
            t, opens = self._stack.pop()
            if opens:
                self._chart.pop()
            if t == tag:
                break
        if tag == self._in:
            self._in = None

    def handle_data(self, data):
        if self._in == "script":
            self.scripts[-1] += data
        elif self._in == "h1":
            self.h1[-1] += data
        elif self._in == "text":
            self.svg_text[-1] += data


def summarise(dom: str) -> DomSummary:
    s = DomSummary()
    s.feed(dom)
    return s


if __name__ == "__main__":  # refresh docs/images from a finished run with its report
    out, dest = Path(sys.argv[1]), Path(sys.argv[2])
    screenshot(out / "report.html", dest / "report.png")
    shutil.copyfile(out / "charts" / (sys.argv[3] if len(sys.argv) > 3 else "switch_rate.png"),
                    dest / "chart.png")
    print(f"wrote {dest / 'report.png'} and {dest / 'chart.png'}")
