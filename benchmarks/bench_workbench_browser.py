"""Benchmark of the workbench in a real browser: slider key press -> updated class table.

JupyterLab and headless Chromium (the recipe of ``tests/_lab.py``) show the
workbench of the invented 200-pair box (``bench_workbench.invented_box``).
The reference-level slider is moved one step at a time with the keyboard;
the page records, with ``performance.now()``, the time from the key event to
the first change of the class table's text (goal: 100 ms) and to the frame
painted after the status line says the velocity section was updated (its
data arrive before the status; goal: 300 ms). Each move waits for the slower views to finish
before the next, so moves are measured one at a time.

Run as a script: ``python benchmarks/bench_workbench_browser.py [--moves N]``.
Not part of the test suite (no timed assertions there).
"""

from __future__ import annotations

import argparse
import shutil
import statistics
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
TABLE_GOAL = 0.100  # s
FIGURE_GOAL = 0.300  # s

RECORDER = """() => {
  const rec = window.__skBench = {t0: 0, table: [], figure: [], tableDone: true, figDone: true};
  document.addEventListener('keydown', () => {
    rec.t0 = performance.now(); rec.tableDone = false; rec.figDone = false; }, true);
  const table = document.querySelector('.sk-class-table');
  new MutationObserver(() => {
    if (!rec.tableDone) { rec.table.push(performance.now() - rec.t0); rec.tableDone = true; }
  }).observe(table, {subtree: true, childList: true, characterData: true});
  const status = document.querySelector('.sk-status');
  new MutationObserver(() => {
    if (!rec.figDone && status.textContent.includes('section updated')) {
      rec.figDone = true;  // the section's data came first; count its next painted frame
      const t0 = rec.t0;
      requestAnimationFrame(() => requestAnimationFrame(
        () => rec.figure.push(performance.now() - t0))); }
  }).observe(status, {subtree: true, childList: true, characterData: true});
}"""

NOTEBOOK = f"""import sys
sys.path.insert(0, {str(HERE)!r})
from bench_workbench import invented_box
from sectionkit.workbench.model import WorkbenchState
from sectionkit.workbench.view import WorkbenchView
config, sections = invented_box()
WorkbenchView(WorkbenchState(config, sections, autosave=False))"""


def run(moves: int = 20) -> list[tuple[str, float, float]]:
    """Median key press -> class table and -> section update, seconds, with their goals."""
    sys.path.insert(0, str(HERE.parent / "tests"))
    from _lab import BROWSER_ARGS, CHROMIUM, lab_server, open_workbench_page, write_notebook
    from playwright.sync_api import sync_playwright

    tmp = Path(tempfile.mkdtemp(prefix="sk-bench-"))
    try:
        root = tmp / "root"
        root.mkdir()
        write_notebook(root / "bench.ipynb", NOTEBOOK)
        with lab_server(root, tmp / "scratch") as (base, token), sync_playwright() as p:
            browser = p.chromium.launch(executable_path=str(CHROMIUM), headless=True,
                                        args=BROWSER_ARGS)
            try:
                page = open_workbench_page(browser, base, token, "bench.ipynb", (1280, 800))
                page.evaluate(RECORDER)
                handle = page.locator(".sk-reference-slider .noUi-handle")
                handle.scroll_into_view_if_needed()
                handle.focus()
                for n in range(moves + 1):
                    handle.press("ArrowRight")
                    page.wait_for_function(
                        "(n) => window.__skBench.table.length > n"
                        " && window.__skBench.figure.length > n", arg=n, timeout=30_000)
                    page.wait_for_function(
                        "() => document.querySelector('.sk-status').textContent"
                        ".includes('drawn')", timeout=30_000)
                rec = page.evaluate("() => window.__skBench")
            finally:
                browser.close()
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    table = [t / 1e3 for t in rec["table"][1:]]  # the first move warms caches
    figure = [t / 1e3 for t in rec["figure"][1:]]
    return [
        ("browser: key press -> class table, 200 pairs (median)", statistics.median(table),
         TABLE_GOAL),
        ("browser: key press -> class table, 200 pairs (slowest)", max(table), TABLE_GOAL),
        ("browser: key press -> velocity section data, 200 pairs (median)",
         statistics.median(figure), FIGURE_GOAL),
        ("browser: key press -> velocity section data, 200 pairs (slowest)", max(figure),
         FIGURE_GOAL),
    ]


def main(argv: list[str] | None = None) -> None:
    """Print the benchmark table."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--moves", type=int, default=20, help="slider moves to time")
    args = parser.parse_args(argv)
    print(f"{'step':<66} {'measured':>10} {'goal':>8}")
    for name, measured, goal in run(args.moves):
        verdict = "met" if measured <= goal else "short"
        print(f"{name:<66} {measured * 1e3:>8.1f}ms {goal * 1e3:>6.0f}ms {verdict}")


if __name__ == "__main__":
    main()
