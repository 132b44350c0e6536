"""Render an HTML file in headless Chromium and judge the screenshot (used by test_report.py).

Chromium is Debian's package (``/usr/bin/chromium``; ``make test`` installs it with QGIS). The
flags keep it from reaching out to the network, which a closed build machine refuses anyway.
"""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import tempfile
from pathlib import Path

#: Names Chromium goes by, in the order tried.
CHROMIUM_NAMES = ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable")


def find_chromium():
    """Path of a Chromium executable, or None."""
    for name in CHROMIUM_NAMES:
        found = shutil.which(name)
        if found:
            return found
    return None


def screenshot(html_path, png_path, width=1280, height=2400, timeout=120, chromium=None):
    """Screenshot of the top ``width`` × ``height`` pixels of a local HTML file.

    Chromium runs in its own process group with a fresh profile folder; on a timeout the whole
    group (only what this call started) is stopped.
    """
    exe = chromium or find_chromium()
    if exe is None:
        raise FileNotFoundError("chromium is not installed")
    png_path = Path(png_path)
    profile = tempfile.mkdtemp(prefix="recharge-atlas-chromium-")
    command = [
        exe,
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--hide-scrollbars",
        f"--user-data-dir={profile}",
        f"--window-size={int(width)},{int(height)}",
        f"--screenshot={png_path}",
        Path(html_path).resolve().as_uri(),
    ]
    process = subprocess.Popen(
        command,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        start_new_session=True,
    )
    try:
        _, err = process.communicate(timeout=timeout)
    except subprocess.TimeoutExpired:
        _stop_group(process.pid)  # the leader still runs, so the group is surely ours
        process.communicate()
        raise
    finally:
        shutil.rmtree(profile, ignore_errors=True)
    if not png_path.exists():
        tail = err.decode("utf-8", "replace").strip().splitlines()[-3:]
        raise RuntimeError(f"chromium wrote no screenshot (exit {process.returncode}): {tail}")
    return png_path


def _stop_group(pid):
    """Stop the process group this module started (by its id), helpers included."""
    try:
        os.killpg(pid, signal.SIGKILL)
    except (ProcessLookupError, PermissionError):
        pass


def image_summary(png_path, colours=()):
    """Numbers that tell a real page from a blank one.

    Returns a dict: ``size``; ``ink`` (share of pixels that are not near-white);
    ``distinct`` (colours in use); and for each hex colour in ``colours`` the number of
    pixels within a small distance of it.
    """
    import numpy as np
    from PIL import Image

    image = Image.open(png_path).convert("RGB")
    pixels = np.asarray(image).reshape(-1, 3).astype(int)
    summary = {
        "size": image.size,
        "ink": float((pixels.min(axis=1) < 235).mean()),
        "distinct": int(np.unique(pixels[:, 0] * 65536 + pixels[:, 1] * 256 + pixels[:, 2]).size),
    }
    for colour in colours:
        rgb = np.array([int(colour[i : i + 2], 16) for i in (1, 3, 5)])
        summary[colour] = int((np.abs(pixels - rgb).max(axis=1) <= 6).sum())
    return summary
