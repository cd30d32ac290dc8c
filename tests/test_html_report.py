"""The HTML reports of run, sweep, fuzz and results show, opened in a real headless browser
(Debian's chromium driven by playwright through its executable path): the page loads with no
console error, every image decodes, the verdict table is there, and the caution; nothing is
fetched from outside the file."""

from __future__ import annotations

import os
import shutil

import pytest

from .helpers import DEMO
from .test_cli_design import pfcrig

CHROMIUM = os.environ.get("PFCRIG_CHROMIUM") or shutil.which("chromium")
# as root in a closed network: no sandbox, and none of chromium's background connections
CHROMIUM_ARGS = [
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]


def _browser():
    sync_api = pytest.importorskip("playwright.sync_api", reason="playwright not installed")
    if not CHROMIUM:
        pytest.skip("chromium not installed (Debian package chromium)")
    return sync_api


def _check_page(sync_api, path, verdict_rows: int) -> dict:
    with sync_api.sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, headless=True, args=CHROMIUM_ARGS)
        try:
            page = browser.new_page()
            errors: list[str] = []
            requests: list[str] = []
            page.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
            page.on("pageerror", lambda e: errors.append(str(e)))
            page.on("request", lambda r: requests.append(r.url))
            page.goto(path.as_uri())
            page.wait_for_load_state("load")
            info = page.evaluate(
                """() => ({
                    images: Array.from(document.images).map(
                        i => ({complete: i.complete, w: i.naturalWidth, h: i.naturalHeight})),
                    verdictRows: document.querySelectorAll('#verdicts tr').length,
                    caution: document.querySelector('.caution').textContent,
                    title: document.title,
                })"""
            )
        finally:
            browser.close()
    assert errors == [], errors
    outside = [u for u in requests if not u.startswith(("file:", "data:"))]
    assert outside == [], outside
    assert all(i["complete"] and i["w"] > 0 and i["h"] > 0 for i in info["images"]), info
    assert info["verdictRows"] == verdict_rows + 1  # the head row and one per verdict
    assert "lethal" in info["caution"] and "qualified people" in info["caution"]
    return info


@pytest.mark.slow
def test_html_reports_open_cleanly_in_a_browser(tmp_path):
    sync_api = _browser()
    run_html = tmp_path / "run.html"
    r = pfcrig("run", str(DEMO), "--duration", "0.45", "--quiet", "--html", str(run_html))
    assert r.returncode == 0, r.stderr
    info = _check_page(sync_api, run_html, 6)
    assert len(info["images"]) == 3  # waveforms, bus/duty/mode, harmonics

    sweep_html = tmp_path / "sweep.html"
    db = tmp_path / "r.sqlite"
    r = pfcrig(
        "sweep",
        str(DEMO),
        "--vrms",
        "230",
        "--load",
        "50,100",
        "--workers",
        "1",
        "--db",
        str(db),
        "--html",
        str(sweep_html),
    )
    assert r.returncode == 0, r.stderr
    assert len(_check_page(sync_api, sweep_html, 2)["images"]) == 2

    fuzz_html = tmp_path / "fuzz.html"
    r = pfcrig(
        "fuzz",
        str(DEMO),
        "--examples",
        "8",
        "--workers",
        "1",
        "--db",
        str(db),
        "--out",
        str(tmp_path / "f"),
        "--html",
        str(fuzz_html),
    )
    assert r.returncode in (0, 1), r.stderr
    from harness.campaigns.invariants import INVARIANTS

    _check_page(sync_api, fuzz_html, len(INVARIANTS))

    show_html = tmp_path / "show.html"
    r = pfcrig("results", "--db", str(db), "show", "2", "--html", str(show_html))
    assert r.returncode == 0, r.stderr
    _check_page(sync_api, show_html, 8)
