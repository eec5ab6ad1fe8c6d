"""Opening an HTML file in headless Chromium and reading back what the page reported.

The report's inline script writes ``data-figures-loaded``, ``data-figures-total``
and (on an uncaught error) ``data-script-errors`` on ``<body>``; Chromium's
``--dump-dom`` prints the DOM after the load event (``--virtual-time-budget``
lets the page finish first), and ``--enable-logging=stderr`` prints every
message of the page's console as a line tagged ``CONSOLE``.  Chromium's own
start-up noise (D-Bus, GPU, sandbox warnings) never carries that tag, so only
tagged lines — and error lines that name the page — count as the page's.
"""

from __future__ import annotations

import re
import shutil
import subprocess
import tempfile
from dataclasses import dataclass
from html.parser import HTMLParser
from pathlib import Path

import pytest

CANDIDATES = ("chromium", "chromium-browser", "google-chrome")
FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
         "--no-first-run", "--enable-logging=stderr", "--v=0", "--virtual-time-budget=5000",
         # no network at all, whatever the page asks for (it should ask for nothing)
         "--host-resolver-rules=MAP * ~NOTFOUND")


def chromium() -> str:
    """The Chromium binary; fails the test (never skips) when it is not installed."""
    for name in CANDIDATES:
        found = shutil.which(name)
        if found:
            return found
    if Path("/usr/bin/chromium").is_file():
        return "/usr/bin/chromium"
    pytest.fail("Chromium is not installed, and the report test needs a real browser: install "
                "Debian's `chromium` package (sudo apt-get install -y chromium); .ci/run does "
                "this itself", pytrace=False)


@dataclass
class PageResult:
    """What a page reported in the browser."""

    body: dict[str, str]        # attributes of <body> in the dumped DOM
    page_messages: list[str]    # console lines of the page (and error lines naming it)
    stderr: str

    @property
    def figures_loaded(self) -> int:
        return int(self.body.get("data-figures-loaded", "-1"))

    @property
    def figures_total(self) -> int:
        return int(self.body.get("data-figures-total", "-1"))


class _Body(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.attrs: dict[str, str] | None = None

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        if tag == "body" and self.attrs is None:
            self.attrs = {k: v or "" for k, v in attrs}


_CONSOLE = re.compile(r":CONSOLE[:(\]]")


def open_page(path: Path, *, timeout: float = 90.0) -> PageResult:
    """Load ``path`` in headless Chromium; the dumped DOM's body attributes and page messages."""
    url = path.resolve().as_uri()
    with tempfile.TemporaryDirectory(prefix="linobs-chromium-") as profile:
        proc = subprocess.run([chromium(), *FLAGS, f"--user-data-dir={profile}", "--dump-dom",
                               url], capture_output=True, text=True, timeout=timeout,
                              check=False)
    assert proc.returncode == 0, f"Chromium exited with {proc.returncode}:\n{proc.stderr[-3000:]}"
    parser = _Body()
    parser.feed(proc.stdout)
    assert parser.attrs is not None, f"no <body> in the dumped DOM:\n{proc.stdout[:2000]}"
    lines = proc.stderr.splitlines()
    page = [ln for ln in lines if _CONSOLE.search(ln) or (":ERROR:" in ln and url in ln)]
    return PageResult(parser.attrs, page, proc.stderr)
