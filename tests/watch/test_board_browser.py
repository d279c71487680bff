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
    """Text of every table row's cells."""

    def __init__(self):
        super().__init__()
        self.rows: list[list[str]] = []
        self._cell: list[str] | None = None

    def handle_starttag(self, tag, attrs):
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

