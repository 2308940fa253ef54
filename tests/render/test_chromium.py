"""The HTML report in a real browser: Debian's headless Chromium renders the verdict and every
section, and no request leaves the file (the Content-Security-Policy blocks scripts and network).

Required when CI=true (``.ci/run`` installs ``chromium``); elsewhere skipped with a notice when
/usr/bin/chromium is absent.
"""

from __future__ import annotations

import http.server
import os
import re
import shutil
import subprocess
import threading
from pathlib import Path

import pytest

from .conftest import SECTION_TITLES, Built

CHROMIUM = shutil.which("chromium") or (
    "/usr/bin/chromium" if Path("/usr/bin/chromium").exists() else None
)

if CHROMIUM is None:
    if os.environ.get("CI") == "true":
        raise RuntimeError(
            "CI=true but chromium is not installed: .ci/run must install Debian's chromium package"
        )
    pytest.skip(
        "headless Chromium check skipped: /usr/bin/chromium is not installed",
        allow_module_level=True,
    )


def dump_dom(html_file: Path, profile: Path) -> str:
    args = [
        CHROMIUM,
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--disable-dev-shm-usage",
        f"--user-data-dir={profile}",
        "--virtual-time-budget=3000",
        "--dump-dom",
        html_file.as_uri(),
    ]
    r = subprocess.run(args, capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr[-2000:]
    return r.stdout


class _Counter(http.server.BaseHTTPRequestHandler):
    hits: list[str] = []

    def do_GET(self) -> None:  # noqa: N802
        type(self).hits.append(self.path)
        self.send_response(200)
        self.send_header("Content-Type", "text/plain")
        self.end_headers()
        self.wfile.write(b"x")

    def log_message(self, *a) -> None:  # type: ignore[no-untyped-def]
        pass


@pytest.fixture
def loopback():  # type: ignore[no-untyped-def]
    _Counter.hits = []
    srv = http.server.HTTPServer(("127.0.0.1", 0), _Counter)
    t = threading.Thread(target=srv.serve_forever, daemon=True)
    t.start()
    yield f"http://127.0.0.1:{srv.server_address[1]}", _Counter
    srv.shutdown()
    srv.server_close()


def test_report_renders_in_chromium(built_ordinal: Built, tmp_path: Path, loopback) -> None:  # type: ignore[no-untyped-def]
    url, counter = loopback
    # the report itself, plus (in a copy) markup a broken template might let through: the
    # CSP must stop the script and the network requests, and the report must still render
    page = tmp_path / "report.html"
    hostile = (
        f'<img src="{url}/img.png"><link rel="stylesheet" href="{url}/s.css">'
        f'<script>document.body.setAttribute("data-leak", "ran"); fetch("{url}/fetch");</script>'
        f'<iframe src="{url}/frame"></iframe>'
    )
    page.write_text(built_ordinal.html.replace("</main>", hostile + "</main>"), encoding="utf-8")
    dom = dump_dom(page, tmp_path / "profile")
    assert counter.hits == [], f"requests left the file: {counter.hits}"
    assert 'data-leak="ran"' not in dom
    text = " ".join(re.sub(r"<[^>]+>", " ", dom).split())
    assert built_ordinal.results["verdict"]["outcome"] in text
    for title in SECTION_TITLES:
        assert title in text, title
    assert 'class="verdict-word"' in dom


def test_unmodified_report_dom(built_binary: Built, tmp_path: Path) -> None:
    dom = dump_dom(built_binary.html_path, tmp_path / "profile")
    assert dom.count("<h2") == len([t for t in SECTION_TITLES if t != "Ordered-scale agreement"])
    assert dom.count('<img src="data:image/svg+xml;base64,') >= 3
