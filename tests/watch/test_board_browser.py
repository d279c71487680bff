"""The status board in a real browser (Debian's chromium, headless).

The board is served by ``watch.board.serve_board`` on localhost; chromium loads every page, the
server's log shows every file the browser fetched (so a missing image is a 404 there), and
chromium's log (--enable-logging=stderr) carries the console messages (script errors, Content
Security Policy violations). A screenshot of the overview is kept in tests/artifacts/.

Skipped when /usr/bin/chromium is missing: install it with
``apt-get update && apt-get install -y chromium``.
"""

from __future__ import annotations

import http.server
import subprocess
import threading
from html.parser import HTMLParser
from pathlib import Path

import pytest

from tests.watch.board_fixtures import HOSTILE_SECTION, NOW, make_workspace
from watch.board import build_board, section_page_name, serve_board

CHROMIUM = Path("/usr/bin/chromium")
ARTIFACTS = Path(__file__).resolve().parents[1] / "artifacts"

pytestmark = pytest.mark.skipif(
    not CHROMIUM.exists(),
    reason="/usr/bin/chromium not installed (apt-get update && apt-get install -y chromium)",
)


class _Rows(HTMLParser):
    """Text of every cell of the overview table's rows (not the key of the levels below it)."""

    def __init__(self):
        super().__init__()
        self.rows: list[list[str]] = []
        self._cell: list[str] | None = None
        self._inside = False

    def handle_starttag(self, tag, attrs):
        if tag == "table":
            self._inside = "overview" in (dict(attrs).get("class") or "")
        if not self._inside:
            return
        if tag == "tr":
            self.rows.append([])
        elif tag in ("td", "th"):
            self._cell = []

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._cell is not None and self.rows:
            self.rows[-1].append(" ".join("".join(self._cell).split()))
            self._cell = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell.append(data)


class _Images(HTMLParser):
    def __init__(self):
        super().__init__()
        self.sources: list[str] = []

    def handle_starttag(self, tag, attrs):
        if tag == "img":
            self.sources.append(dict(attrs)["src"])


@pytest.fixture(scope="module")
def served(tmp_path_factory):
    """(workspace, board result, base URL, request log) with the board served on localhost."""
    root = tmp_path_factory.mktemp("browser")
    workspace = make_workspace(root / "ws", hostile=True)
    result = build_board(workspace, NOW)
    log: list[tuple[str, int]] = []
    original = http.server.BaseHTTPRequestHandler.log_request

    def record(handler, code="-", size="-"):
        log.append((handler.path, int(code)))

    http.server.BaseHTTPRequestHandler.log_request = record
    server = serve_board(result.out, "127.0.0.1", 0)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        yield workspace, result, f"http://127.0.0.1:{server.server_address[1]}", log, root
    finally:
        server.shutdown()
        server.server_close()
        http.server.BaseHTTPRequestHandler.log_request = original


def _chromium(url: str, profile: Path, *extra: str) -> subprocess.CompletedProcess:
    command = [
        str(CHROMIUM), "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
        "--no-first-run", "--disable-background-networking", "--disable-component-update",
        "--disable-sync", f"--user-data-dir={profile}", "--enable-logging=stderr", "--v=0",
        *extra, url,
    ]
    return subprocess.run(command, capture_output=True, text=True, timeout=120, check=True)


def _console(stderr: str) -> list[str]:
    """Console messages (script errors, CSP violations, ...) in chromium's log."""
    return [line for line in stderr.splitlines() if ":CONSOLE" in line]


def _load(url: str, profile: Path, log: list) -> tuple[str, list[str], list[tuple[str, int]]]:
    """(DOM after load, console messages, files fetched with their HTTP status)."""
    start = len(log)
    done = _chromium(url, profile, "--dump-dom")
    return done.stdout, _console(done.stderr), log[start:]


def test_overview_lists_every_section_with_its_level(served):
    workspace, result, base, log, root = served
    dom, console, fetched = _load(f"{base}/index.html", root / "profile", log)
    assert console == []
    assert [code for _, code in fetched if code != 200] == []
    parser = _Rows()
    parser.feed(dom)
    body = [row for row in parser.rows if row and not row[0].startswith("Section")]
    shown = {row[0]: row[1] for row in body}
    # Each configured section appears once, with its level written out.
    assert len(body) == len(result.status.sections) == 2
    for section in result.status.sections:
        cell = next(v for k, v in shown.items() if k.startswith(section.id))
        assert section.level.word in cell
    # The hostile id is text in the page, not an element.
    assert any(k.startswith(HOSTILE_SECTION) for k in shown)
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in dom
    assert "<script" not in dom


def test_section_pages_load_with_their_images_and_no_console_errors(served):
    workspace, result, base, log, root = served
    for section in result.status.sections:
        page = section_page_name(section.id)
        dom, console, fetched = _load(f"{base}/{page}", root / "profile", log)
        assert console == [], (page, console)
        images = _Images()
        images.feed((result.out / page).read_text(encoding="utf-8"))
        assert images.sources, page
        status = {path: code for path, code in fetched}
        for source in images.sources:
            assert status.get("/" + source) == 200, (page, source, fetched)
        assert [f for f in fetched if f[1] != 200] == []


def test_screenshot_of_the_overview_is_kept(served):
    workspace, result, base, log, root = served
    ARTIFACTS.mkdir(exist_ok=True)
    shot = ARTIFACTS / "board_overview.png"
    shot.unlink(missing_ok=True)
    _chromium(f"{base}/index.html", root / "profile", "--window-size=1500,1000",
              f"--screenshot={shot}", "--hide-scrollbars")
    assert shot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert shot.stat().st_size > 20_000  # a rendered page, not a blank one


def test_the_checks_catch_a_broken_page(served, tmp_path):
    """Control: a page with a missing image and an inline script is caught by both checks."""
    workspace, result, base, log, root = served
    broken = result.out / "broken-control.html"
    text = (result.out / "index.html").read_text(encoding="utf-8")
    text = text.replace("</main>", '<img src="img/missing.png" alt="x"><script>1</script></main>')
    broken.write_text(text, encoding="utf-8")
    try:
        _, console, fetched = _load(f"{base}/broken-control.html", tmp_path / "profile", log)
    finally:
        broken.unlink()
    assert ("/img/missing.png", 404) in fetched
    assert any("Content Security Policy" in line for line in console)



#: Measured in the page by chromium itself: the computed look of every level badge, and where
#: each column of the overview lies against the 1280 px window and the table's frame.
_PROBE = """
<pre id="probe"></pre>
<script>
const rgb = s => s.match(/[0-9.]+/g).slice(0, 3).map(Number);
const badges = [...document.querySelectorAll('.badge')].map(b => {
  const c = getComputedStyle(b);
  return {cls: b.className, text: b.textContent, cue: b.querySelector('.cue').textContent,
          background: rgb(c.backgroundColor), color: rgb(c.color), borderStyle: c.borderTopStyle,
          borderWidth: parseFloat(c.borderTopWidth)};
});
const frame = document.querySelector('table.overview').closest('.frame');
const box = frame.getBoundingClientRect();
const columns = [...document.querySelectorAll('table.overview thead th')].map(th => {
  const r = th.getBoundingClientRect();
  return {text: th.textContent, left: r.left, right: r.right, width: r.width,
          display: getComputedStyle(th).display, visibility: getComputedStyle(th).visibility};
});
document.getElementById('probe').textContent = JSON.stringify({
  badges, columns, innerWidth: window.innerWidth,
  pageWidth: document.documentElement.scrollWidth,
  frame: {left: box.left, right: box.right, scrollWidth: frame.scrollWidth,
          clientWidth: frame.clientWidth, overflowX: getComputedStyle(frame).overflowX}});
</script>
"""


def _probe(result, root, name: str) -> dict:
    """Load the overview with the probe in chromium at 1280 px (a copy without the Content
    Security Policy, which forbids the probe's inline script) and return its measurements."""
    import json
    import re

    text = (result.out / "index.html").read_text(encoding="utf-8")
    text = re.sub(r'<meta http-equiv="Content-Security-Policy"[^>]*>', "", text)
    probe = result.out / f"{name}.html"
    probe.write_text(text.replace("</body>", _PROBE + "</body>"), encoding="utf-8")
    try:
        done = _chromium(probe.as_uri(), root / "probe-profile", "--window-size=1280,900",
                         "--dump-dom")
    finally:
        probe.unlink()
    found = re.search(r'<pre id="probe">(.*?)</pre>', done.stdout, re.S)
    assert found, done.stdout[-2000:]
    import html as html_module

    return json.loads(html_module.unescape(found.group(1)))


def _luminance(rgb) -> float:
    """Relative luminance of an sRGB colour (WCAG 2.1, definition of relative luminance)."""
    def linear(c):
        c = c / 255.0
        return c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4
    r, g, b = (linear(c) for c in rgb)
    return 0.2126 * r + 0.7152 * g + 0.0722 * b


def test_levels_differ_in_more_than_hue_and_no_column_is_hidden_at_1280_px(served):
    workspace, result, base, log, root = served
    measured = _probe(result, root, "probe-control")
    # The key lists every level of the site: no alert, watch, act (the fixture's two levels)
    # and data alert, each once.
    looks = {}
    for badge in measured["badges"]:
        looks.setdefault(badge["cls"], badge)
    assert {"badge lv-0", "badge lv-1", "badge lv-3", "badge lv-none"} <= set(looks), looks.keys()
    classes = sorted(looks)
    for i, a in enumerate(classes):
        for b in classes[i + 1:]:
            one, other = looks[a], looks[b]
            # A cue people read without colour (the severity marks)...
            assert one["cue"] != other["cue"], (a, b)
            # ...and a difference that survives grey-scale printing: the badge's lightness
            # (WCAG relative luminance 0.1 apart or more) or the style of its border.
            lightness = abs(_luminance(one["background"]) - _luminance(other["background"]))
            assert lightness >= 0.1 or one["borderStyle"] != other["borderStyle"], (a, b, lightness)
    # The levels of the owner get darker as they get graver, so grey print keeps their order.
    graver = [looks[c] for c in ("badge lv-0", "badge lv-1", "badge lv-3")]
    assert [_luminance(x["background"]) for x in graver] == sorted(
        (_luminance(x["background"]) for x in graver), reverse=True)
    # Text on every badge stays readable: contrast ratio 4.5:1 or more (WCAG 2.1, 1.4.3).
    for badge in looks.values():
        light, dark = sorted((_luminance(badge["background"]), _luminance(badge["color"])), reverse=True)
        assert (light + 0.05) / (dark + 0.05) >= 4.5, badge

    # Every column of the overview is shown and lies inside the window at 1280 px, or inside
    # a frame that scrolls; the page itself never scrolls sideways.
    frame, columns = measured["frame"], measured["columns"]
    assert len(columns) == 8 and columns[-1]["text"] == "Data-quality problems"
    assert measured["pageWidth"] <= measured["innerWidth"]
    for column in columns:
        assert column["display"] != "none" and column["visibility"] == "visible", column
        assert column["width"] > 40, column
        if frame["scrollWidth"] > frame["clientWidth"]:
            assert frame["overflowX"] in ("auto", "scroll")
            assert column["right"] <= frame["left"] + frame["scrollWidth"] + 1, column
        else:
            assert column["right"] <= measured["innerWidth"], column
