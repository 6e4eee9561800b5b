"""The HTML report of a CER in a real browser: headless Chromium (Debian package
``chromium``; .ci/run installs it) loads it with no console message, every figure decoded,
and a screenshot of the CER card is kept in test-artifacts/ (ignored by git) for a person
to look at. Skipped, with the reason, where Chromium is missing.

The browser is the outside reference here: its own parser, image decoder and console.
Data are invented (fixed seed).
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from .bookfactory import build_book, run

ROOT = Path(__file__).resolve().parents[1]
ARTIFACTS = ROOT / "test-artifacts"
BROWSER = shutil.which("chromium") or shutil.which("chromium-browser")
pytestmark = pytest.mark.skipif(BROWSER is None, reason="Chromium is not installed (Debian "
                                "package chromium; .ci/run installs it)")

# run in the page after load: every image complete with a decoded size, errors caught
CHECK = """<script>
(() => {
  const errors = [];
  window.addEventListener("error", e => errors.push(String(e.message || e.target.src || e)),
                          true);
  window.addEventListener("load", () => {
    const imgs = [...document.images];
    const ok = imgs.filter(i => i.complete && i.naturalWidth > 0 && i.naturalHeight > 0);
    document.body.setAttribute("data-xb-check", JSON.stringify(
      {images: imgs.length, decoded: ok.length, errors: errors,
       card: !!document.querySelector("section.card table")}));
  });
})();
</script>"""


def chromium(*args: str, profile: Path) -> subprocess.CompletedProcess:
    return subprocess.run([BROWSER, "--headless", "--no-sandbox", "--disable-gpu",
                           "--hide-scrollbars", f"--user-data-dir={profile}",
                           "--enable-logging=stderr", "--v=0", *args],
                          capture_output=True, text=True, timeout=120)


@pytest.fixture(scope="module")
def report(tmp_path_factory) -> Path:
    tmp = tmp_path_factory.mktemp("browser")
    rng = np.random.default_rng(808)
    weight = np.round(np.sort(rng.uniform(5, 90, 14)), 1)
    cost = np.round(7.5 * weight**0.72 * np.exp(rng.normal(0, 0.08, weight.size)), 2)
    book = build_book(tmp / "steel.xlsx", {"Data": [["weight", "cost"]] + [
        [float(w), float(c)] for w, c in zip(weight, cost)]})
    out = tmp / "cer-report.html"
    proc = subprocess.run([sys.executable, "-m", "xlbridge.cli", "report", str(book), "--y",
                           "Data!B:B", "--x", "Data!A:A", "--model", "power", "--options",
                           "method=mupe; base_year=2024", "--out", str(out)],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    return out


def test_report_loads_without_console_messages(report, tmp_path):
    proc = chromium("--dump-dom", report.as_uri(), profile=tmp_path / "profile")
    assert proc.returncode == 0, proc.stderr[-2000:]
    console = [ln for ln in proc.stderr.splitlines() if ":CONSOLE" in ln]
    assert console == []
    assert "CER card" in proc.stdout and "</html>" in proc.stdout


def test_every_figure_is_decoded_and_the_card_is_there(report, tmp_path):
    checked = tmp_path / "checked.html"  # a copy with the check script; the report is kept
    checked.write_text(report.read_text(encoding="utf-8").replace("</body>", CHECK + "</body>"),
                       encoding="utf-8")
    proc = chromium("--dump-dom", checked.as_uri(), profile=tmp_path / "profile")
    m = re.search(r'data-xb-check="([^"]*)"', proc.stdout)
    assert m, proc.stderr[-2000:]
    result = json.loads(m.group(1).replace("&quot;", '"'))
    assert result["images"] == 2 and result["decoded"] == 2
    assert result["errors"] == [] and result["card"] is True


def test_screenshot_of_the_card_is_kept(report, tmp_path):
    ARTIFACTS.mkdir(exist_ok=True)
    shot = ARTIFACTS / "cer-card.png"
    shot.unlink(missing_ok=True)
    proc = chromium("--window-size=1000,1000", f"--screenshot={shot}", report.as_uri(),
                    profile=tmp_path / "profile")
    assert proc.returncode == 0 and shot.exists(), proc.stderr[-2000:]
    data = shot.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 10_000
    print(f"screenshot of the CER card: {shot}")


def test_report_command_needs_the_method_for_a_cer_form(tmp_path, capsys):
    book = build_book(tmp_path / "b.xlsx", {"D": [["w", "c"], [1.0, 2.0], [2.0, 3.0],
                                                  [3.0, 5.0], [4.0, 6.0]]})
    code, out, err = run(["report", book, "--y", "D!B:B", "--x", "D!A:A", "--model", "power",
                          "--out", tmp_path / "r.html"], capsys)
    assert code == 2 and "method=" in err and not (tmp_path / "r.html").exists()
