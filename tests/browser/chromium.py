"""Finding Debian's Chromium and the switches the tests and the benchmark launch it with."""

from __future__ import annotations

import os
import shutil

#: Chromium switches: headless, no background traffic, no name resolves except the local server.
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                 "--disable-background-networking", "--disable-component-update", "--disable-sync",
                 "--disable-dev-shm-usage",
                 "--host-resolver-rules=MAP * ~NOTFOUND, EXCLUDE 127.0.0.1, EXCLUDE localhost"]


def find_chromium() -> str | None:
    """Path of a Chromium executable, or None."""
    explicit = os.environ.get("AMPPLAN_CHROMIUM")
    if explicit:
        return explicit if os.access(explicit, os.X_OK) else None
    if os.access("/usr/bin/chromium", os.X_OK):
        return "/usr/bin/chromium"
    return shutil.which("chromium") or shutil.which("chromium-browser")
