#!/usr/bin/env python3
"""Open a replay's report.html in a real headless browser (Debian's
chromium through its chromedriver, both given by path: nothing is
downloaded) and check that it loads offline without console errors and
that every plot is there and rendered.

Checks, each a failure on its own:
- the page loads from file:// and fetches nothing (no resource entries);
- the browser's console holds no error (level SEVERE);
- the caution is shown;
- the plots are exactly the SVG files listed in summary.json's outputs,
  each inline in its <figure id="plot-NAME">, rendered with non-zero size,
  and with drawn content (lines or polygons with a non-empty bounding box).

Usage: python3 tests/report/browser.py REPORT_DIR
  [--chromium /usr/bin/chromium] [--chromedriver /usr/bin/chromedriver]
  [--screenshot FILE]
Needs selenium (pinned in .ci/run).
"""

import argparse
import json
import os
import pathlib
import shutil
import sys
import tempfile

from selenium import webdriver
from selenium.webdriver.chrome.service import Service

# Chromium in a closed network: no sandbox (root in CI), no GPU, no
# background fetches, a fresh profile.
FLAGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--disable-dev-shm-usage",
    "--window-size=1100,900",
]

# Per plot: its size on the page and the drawn marks inside it.
PLOT_JS = """
const out = {};
for (const fig of document.querySelectorAll('figure.plot')) {
  const svg = fig.querySelector('svg');
  if (!svg) { out[fig.id] = null; continue; }
  const r = svg.getBoundingClientRect();
  let marks = 0;
  for (const m of svg.querySelectorAll('polyline, polygon, circle')) {
    const b = m.getBBox();
    if (b.width > 0 || b.height > 0) marks++;
  }
  out[fig.id] = {width: r.width, height: r.height, marks: marks,
                 panels: svg.querySelectorAll('g[id*="panel"]').length};
}
return out;
"""


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("report_dir", help="the replay's output folder")
    ap.add_argument("--chromium", default="/usr/bin/chromium")
    ap.add_argument("--chromedriver", default="/usr/bin/chromedriver")
    ap.add_argument("--screenshot", help="write a PNG of the page's top")
    a = ap.parse_args()

    folder = pathlib.Path(a.report_dir).resolve()
    page = folder / "report.html"
    summary = json.loads((folder / "summary.json").read_text(encoding="utf-8"))
    expected = sorted(
        "plot-" + f[: -len(".svg")] for f in summary["outputs"] if f.endswith(".svg")
    )
    if not page.is_file() or "report.html" not in summary["outputs"]:
        sys.exit(f"FAIL: {page} missing or not listed in summary.json outputs")
    if not expected:
        sys.exit("FAIL: summary.json lists no plot")

    profile = tempfile.mkdtemp(prefix="holdup-report-chromium-")
    opts = webdriver.ChromeOptions()
    opts.binary_location = a.chromium
    for f in FLAGS + [f"--user-data-dir={profile}"]:
        opts.add_argument(f)
    opts.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    driver = webdriver.Chrome(service=Service(executable_path=a.chromedriver), options=opts)
    failures = []
    try:
        driver.get(page.as_uri())
        state = driver.execute_script("return document.readyState")
        if state != "complete":
            failures.append(f"page not loaded: readyState {state}")
        fetched = driver.execute_script(
            "return performance.getEntriesByType('resource').map(e => e.name)"
        )
        if fetched:
            failures.append(f"the page fetched resources: {fetched}")
        caution = driver.execute_script(
            "const c = document.querySelector('.caution');"
            "return c ? [c.innerText, c.getBoundingClientRect().height] : null"
        )
        if not caution or "advisory" not in caution[0] or caution[1] <= 0:
            failures.append(f"no visible caution: {caution}")
        plots = driver.execute_script(PLOT_JS)
        found = sorted(plots)
        if found != expected:
            failures.append(f"plots on the page {found}, summary.json lists {expected}")
        for pid in expected:
            p = plots.get(pid)
            if p is None:
                failures.append(f"{pid}: no inline SVG")
            elif p["width"] <= 0 or p["height"] <= 0:
                failures.append(f"{pid}: rendered {p['width']} x {p['height']}")
            elif p["marks"] == 0 or p["panels"] == 0:
                failures.append(f"{pid}: nothing drawn ({p})")
            else:
                print(
                    f"{pid}: {p['width']:.0f} x {p['height']:.0f} px, "
                    f"{p['panels']} panels, {p['marks']} drawn marks"
                )
        for entry in driver.get_log("browser"):
            if entry.get("level") == "SEVERE":
                failures.append(f"console error: {entry.get('message')}")
        if a.screenshot:
            driver.save_screenshot(a.screenshot)
    finally:
        driver.quit()
        shutil.rmtree(profile, ignore_errors=True)
    if failures:
        for f in failures:
            print(f"FAIL: {f}", file=sys.stderr)
        sys.exit(1)
    print(f"{page}: {len(expected)} plots rendered, no console errors, nothing fetched")


if __name__ == "__main__":
    main()
