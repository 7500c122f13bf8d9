"""End to end in a real browser: Debian's chromium driven by Playwright."""
import os
import subprocess
import sys

import pytest

from conftest import CHROMIUM, ROOT

pytestmark = [pytest.mark.browser,
              pytest.mark.skipif(not os.path.exists(CHROMIUM), reason="Debian's chromium is not installed "
                                                                      "(.ci/run installs it)")]
expect = pytest.importorskip("playwright.sync_api").expect


def test_upload_rank_download_matches_cli(page, app_url, demo_csv, tmp_path):
    page.set_viewport_size({"width": 1400, "height": 2400})
    page.goto(app_url, wait_until="domcontentloaded")
    expect(page.get_by_text("The whole model first")).to_be_visible(timeout=90_000)
    page.locator('[data-testid="stFileUploader"] input[type="file"]').set_input_files(demo_csv)
    expect(page.get_by_text("Using the uploaded file")).to_be_visible(timeout=90_000)
    ranked = page.locator('[data-testid="stDataFrame"]').nth(1)
    top = ranked.locator('[data-testid="glide-cell-1-0"]').first
    expect(top).to_have_text("age_band=18-24 & employment_type=gig", timeout=90_000)
    expect(ranked.locator('[data-testid="glide-cell-0-0"]').first).to_have_text("1")
    expect(page.get_by_text("Read flags as signals, not verdicts.").first).to_be_visible()
    shots = os.environ.get("FISSURE_SCREENSHOTS") or str(tmp_path)
    page.screenshot(path=os.path.join(shots, "page-top.png"))
    with page.expect_download(timeout=60_000) as dl:
        page.get_by_role("button", name="slices.csv").click()
    got = tmp_path / "downloaded.csv"
    dl.value.save_as(got)
    out = tmp_path / "cli"
    r = subprocess.run([sys.executable, "-m", "audit", "audit", demo_csv, "--label", "delinquent", "--score",
                        "p_delinquent", "--out", str(out), "--no-report", "--quiet"],
                       capture_output=True, text=True, env={**os.environ, "PYTHONPATH": ROOT})
    assert r.returncode == 0, r.stderr
    assert got.read_bytes() == (out / "slices.csv").read_bytes()
    page.get_by_text("Where noise ends").first.scroll_into_view_if_needed()
    page.screenshot(path=os.path.join(shots, "page-lower.png"))


def test_hostile_report_runs_no_script(page, tmp_path):
    from conftest import random_table

    df = random_table(n=1200, seed=5, effect=0.4)
    df["region"] = df["region"].replace({"r2": "<img src=x onerror=\"window.__pwned=1;alert(1)\">"})
    df.to_csv(tmp_path / "t.csv", index=False)
    r = subprocess.run([sys.executable, "-m", "audit", "audit", str(tmp_path / "t.csv"), "--label", "y", "--score",
                        "p", "--out", str(tmp_path / "out"), "--quiet",
                        "--model-name", "<script>window.__pwned=2;alert(2)</script>"],
                       capture_output=True, text=True, env={**os.environ, "PYTHONPATH": ROOT})
    assert r.returncode == 0, r.stderr
    dialogs = []
    page.on("dialog", lambda d: (dialogs.append(d.message), d.dismiss()))
    page.goto("file://" + str(tmp_path / "out" / "report.html"), wait_until="load")
    page.wait_for_timeout(1500)
    assert page.evaluate("typeof window.__pwned") == "undefined"
    assert dialogs == []
    expect(page.get_by_text("<img src=x onerror=").first).to_be_attached()
    assert page.locator(".js-plotly-plot").count() >= 2  # charts drew offline
