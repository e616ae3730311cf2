"""Debian's chromium, headless, for the report page tests (the binary the CI installs).

A test adds its own inline script to a copy of a page; the script drives
the page and writes what it found into the DOM, which ``--dump-dom``
prints.  ``--screenshot`` of the same copy at the same window size gives
the pixels of the same state.
"""

import os
import re
import shutil
import subprocess
from pathlib import Path

CHROMIUM = shutil.which("chromium") or ("/usr/bin/chromium" if os.path.exists("/usr/bin/chromium") else None)
NO_CHROMIUM = "no chromium browser on this machine (the CI installs Debian's)"


def chromium(args, url, tmp_path: Path):
    """Run chromium headless on ``url`` with a fresh profile; the CompletedProcess."""
    profile = tmp_path / f"profile-{len(list(tmp_path.iterdir()))}"
    cmd = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
           "--disable-component-update", "--disable-sync", "--no-first-run", f"--user-data-dir={profile}",
           "--enable-logging=stderr", "--v=0", "--virtual-time-budget=20000", *args, url]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=120)


def dump_until(args, url, tmp_path: Path, marker: str, tries: int = 3):
    """``--dump-dom`` of ``url`` until ``<pre id="MARKER">`` appears; (probe text or None, last run).

    A driving script that waits for an image's decode writes its marker
    after real (not virtual) time, which a loaded machine can push past
    the virtual-time budget; the page is then loaded again, at most
    ``tries`` times.  A script that throws or never writes its marker
    still fails the test after the last try.
    """
    for _ in range(tries):
        run = chromium([*args, "--dump-dom"], url, tmp_path)
        text = probe_text(run.stdout, marker)
        if text:
            return text, run
    return None, run


def console_lines(stderr: str) -> list[str]:
    """The page's console messages in chromium's log."""
    return [ln for ln in stderr.splitlines() if ":CONSOLE" in ln]


def with_script(page: Path, script: str, name: str) -> Path:
    """A copy of ``page`` beside it with ``script`` (a whole <script> element) added at the end of the body."""
    copy = page.with_name(name)
    copy.write_text(page.read_text(encoding="utf-8").replace("</body>", script + "</body>"), encoding="utf-8")
    return copy


def probe_text(dom: str, marker: str) -> str | None:
    """The text of ``<pre id="MARKER">`` in a dumped DOM (HTML entities of JSON undone)."""
    import html

    m = re.search(rf'<pre id="{marker}"[^>]*>(.*?)</pre>', dom, re.S)
    return html.unescape(m.group(1)) if m else None
