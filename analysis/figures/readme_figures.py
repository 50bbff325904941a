"""Make the README's gallery and interactive-view figures from the plain-model survey of
analysis/survey_corrections (Q = 1..4; 81^3, h = 0.2, box side 16, fixed border).

    python analysis/figures/readme_figures.py RUNS_DIR

RUNS_DIR is the survey's output directory (``solitons survey
analysis/survey_corrections/plain.toml --out RUNS_DIR``).  Writes gallery_q1_4.png and
view_q3.png (a headless-Chromium screenshot of `solitons show --html` for Q = 3) next
to this script; needs Debian's chromium and the playwright package.
"""

import shutil
import sys
import tempfile
from pathlib import Path

import solitons
from solitons.io.results import read_result
from solitons.views.html_view import write_view

HERE = Path(__file__).parent
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--use-angle=swiftshader", "--enable-unsafe-swiftshader"]


def main(runs: Path) -> None:
    results = [sorted((runs / f"Q{q}").glob("*/result.h5"))[0] for q in (1, 2, 3, 4)]
    figure = solitons.gallery(results)
    figure.savefig(HERE / "gallery_q1_4.png")
    print(HERE / "gallery_q1_4.png")

    from playwright.sync_api import sync_playwright

    with tempfile.TemporaryDirectory() as scratch:
        page_path = write_view(read_result(results[2]), Path(scratch) / "view.html", -0.8)
        with sync_playwright() as session:
            browser = session.chromium.launch(executable_path=shutil.which("chromium"), args=FLAGS)
            page = browser.new_page(viewport={"width": 1000, "height": 1040})
            page.goto(page_path.as_uri())
            page.wait_for_selector(".js-plotly-plot canvas")
            page.wait_for_timeout(2000)
            page.screenshot(path=HERE / "view_q3.png", full_page=False)
            browser.close()
    print(HERE / "view_q3.png")


if __name__ == "__main__":
    main(Path(sys.argv[1]))
