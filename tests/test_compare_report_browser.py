"""The comparison report opens in a real headless Chromium without a network and draws its
figure with every plan (headless Debian Chromium, no browser downloads)."""

import os
import shutil
from pathlib import Path

import pytest

from circlesim.outcomes.comparison import compare_files
from circlesim.reports.comparison import write_comparison_report

pytestmark = pytest.mark.browser

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"
CHROMIUM = "/usr/bin/chromium"
ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
        "--disable-background-networking", "--disable-component-update", "--disable-sync"]


def _browser_or_skip():
    if not Path(CHROMIUM).exists() or shutil.which("chromium") is None:
        if os.environ.get("CIRCLESIM_REQUIRE_BROWSER") == "1":
            pytest.fail("CIRCLESIM_REQUIRE_BROWSER=1 but /usr/bin/chromium is missing")
        pytest.skip("no Chromium at /usr/bin/chromium")
    return pytest.importorskip("playwright.sync_api")


def test_comparison_report_opens_offline_and_shows_every_plan(tmp_path):
    playwright = _browser_or_skip()
    comparison = compare_files(sorted(SCENARIOS.glob("wash_in_*.toml")))
    path = write_comparison_report(comparison, tmp_path / "compare.html")
    errors = []
    with playwright.sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=ARGS)
        try:
            page = browser.new_page()
            page.on("pageerror", lambda exc: errors.append(str(exc)))
            page.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
            # no network: every request that is not the file itself is blocked
            page.route("**/*", lambda route: route.continue_()
                       if route.request.url.startswith("file://") else route.abort())
            page.goto(path.as_uri(), wait_until="load")
            page.wait_for_selector(".js-plotly-plot .main-svg", timeout=20000)
            names = page.evaluate("Array.from(document.querySelector('.js-plotly-plot').data,"
                                  " d => d.name)")
            text = page.inner_text("body")
        finally:
            browser.close()
    assert not errors, errors
    for plan in comparison.labels:
        assert any(plan in name for name in names), plan
        assert f"Warnings: {plan}" in text
    assert "not a medical device" in text
