"""Headless Chromium helpers for the report tests (Debian's chromium package)."""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--disable-extensions", "--hide-scrollbars")

# Writes "naturalWidth x naturalHeight" of every image into a data attribute, once loaded.
PROBE = """<script>
window.addEventListener("load", function () {
  var sizes = Array.prototype.map.call(document.images, function (img) {
    return img.complete ? img.naturalWidth + "x" + img.naturalHeight : "0x0"; });
  document.body.setAttribute("data-image-sizes", sizes.join(" "));
});
</script>"""


def chromium() -> str | None:
    for candidate in ("/usr/bin/chromium", shutil.which("chromium"), shutil.which("chromium-browser")):
        if candidate and Path(candidate).exists():
            return candidate
    return None


def run(binary: str, tmp_path: Path, profile: str, *args: str) -> subprocess.CompletedProcess:
    profile_dir = tmp_path / profile
    profile_dir.mkdir()
    return subprocess.run([binary, *FLAGS, f"--user-data-dir={profile_dir}", *args],
                          capture_output=True, timeout=90, check=False)


def dump_dom_with_image_sizes(binary: str, html: Path, tmp_path: Path) -> tuple[str, list[tuple[int, int]]]:
    """The rendered DOM of a copy of ``html`` with the size probe, and each image's decoded size."""
    probe = tmp_path / "probe.html"
    probe.write_text(html.read_text(encoding="utf-8").replace("</body>", PROBE + "</body>"), encoding="utf-8")
    done = run(binary, tmp_path, "profile-dom", "--virtual-time-budget=5000", "--dump-dom", probe.as_uri())
    assert done.returncode == 0, done.stderr.decode(errors="replace")[-2000:]
    dom = done.stdout.decode("utf-8")
    sizes = re.search(r'data-image-sizes="([^"]*)"', dom)
    assert sizes, "the load event never fired in the browser"
    return dom, [tuple(int(v) for v in item.split("x")) for item in sizes.group(1).split()]


def screenshot(binary: str, html: Path, tmp_path: Path, height: int = 4000) -> Path:
    shot = tmp_path / "report.png"
    done = run(binary, tmp_path, "profile-shot", f"--screenshot={shot}", f"--window-size=1280,{height}",
               html.as_uri())
    assert done.returncode == 0 and shot.is_file(), done.stderr.decode(errors="replace")[-2000:]
    return shot
