"""Debian's chromium for the browser tests, through Playwright (no browser download), and their screenshots.

Importing this module from a test module skips it when chromium is missing, unless
``$KNOBLINE_REQUIRE_BROWSER`` is set (CI sets it: a missing browser fails there, never skips).
"""

from __future__ import annotations

import os
import shutil
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import pytest

CHROMIUM = "/usr/bin/chromium"
#: screenshots of every page the tests open (git ignores the folder; CI keeps it as a test artifact)
ARTIFACTS = Path(__file__).resolve().parent / "artifacts"

if not Path(CHROMIUM).exists() or shutil.which("chromium") is None:
    if os.environ.get("KNOBLINE_REQUIRE_BROWSER"):
        pytest.fail(f"KNOBLINE_REQUIRE_BROWSER is set but {CHROMIUM} is missing (apt-get install chromium)",
                    pytrace=False)
    pytest.skip(f"no {CHROMIUM} (apt-get install chromium); set KNOBLINE_REQUIRE_BROWSER to fail instead",
                allow_module_level=True)

sync_api = pytest.importorskip("playwright.sync_api") if not os.environ.get("KNOBLINE_REQUIRE_BROWSER") else \
    __import__("playwright.sync_api", fromlist=["sync_playwright"])


@contextmanager
def chromium() -> Iterator[Any]:
    """Debian's chromium, headless, launched by Playwright; closed afterwards."""
    ARTIFACTS.mkdir(exist_ok=True)
    with sync_api.sync_playwright() as p:
        launched = p.chromium.launch(executable_path=CHROMIUM, args=["--no-sandbox"])
        try:
            yield launched
        finally:
            launched.close()


def shot(page: Any, name: str) -> None:
    """A full-page screenshot of ``page`` as ``artifacts/NAME.png``."""
    page.screenshot(path=str(ARTIFACTS / f"{name}.png"), full_page=True)
