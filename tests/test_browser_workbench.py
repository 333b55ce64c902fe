"""The workbench in a real browser (JupyterLab, headless Chromium) at two screen sizes.

At 1280×800 and at 1920×1080, with JupyterLab's default layout (file browser
open): the workbench does not overflow sideways and no label is cut short;
a refused input shows its ``sk-error`` message inside the viewport and keeps
the typed text; the class table follows a moved reference slider, and one
Ctrl+Z undoes the whole move; clicking a pair on the station map selects it;
the change reached the autosave file. Each step's screenshot is kept in
``test-artifacts/`` (git-ignored). One JupyterLab server serves both sizes,
each with its own copy of the demo box and of the packaged workbench notebook
(``sectionkit/notebooks/workbench.ipynb``).
"""

from __future__ import annotations

import json
import shutil
import time
from pathlib import Path

import pytest
from _lab import BROWSER_ARGS, CHROMIUM, lab_server, open_workbench_page

ROOT = Path(__file__).resolve().parents[1]
ARTIFACTS = ROOT / "test-artifacts"
ARROW_PRESSES = 5
SLIDER_STEP = 10.0  # dbar, sectionkit.workbench.view.SLIDER_STEP
SIZES = [(1280, 800), (1920, 1080)]

pytestmark = [pytest.mark.browser, pytest.mark.timeout(300)]

#: Elements sticking out of the workbench sideways (outside boxes that scroll
#: by design), and labels cut short with an ellipsis.
LAYOUT_PROBLEMS = """() => {
  const root = document.querySelector('.sk-workbench');
  const box = root.getBoundingClientRect();
  const scrolls = (e) => { for (let a = e.parentElement; a && a !== root; a = a.parentElement) {
      const o = getComputedStyle(a).overflowX; if (o === 'auto' || o === 'scroll') return true; }
    return false; };
  const out = [], cut = [];
  for (const e of root.querySelectorAll('*')) {
    const r = e.getBoundingClientRect();
    if (r.width === 0 || !e.offsetParent && e.tagName !== 'svg' && !(e instanceof SVGElement))
      continue;
    if ((r.right > box.right + 0.5 || r.left < box.left - 0.5) && !scrolls(e))
      out.push(`${e.tagName}.${String(e.className.baseVal ?? e.className).slice(0, 60)}`);
    const cs = getComputedStyle(e);
    if (cs.textOverflow === 'ellipsis' && e.scrollWidth > e.clientWidth + 1)
      cut.push(e.textContent.trim().slice(0, 40));
  }
  const area = root.closest('.jp-OutputArea-output') || root.parentElement;
  return {overflow: out.slice(0, 10), truncated: cut,
          scroll: root.scrollWidth - root.clientWidth,
          area: area.scrollWidth - area.clientWidth,
          right: box.right, viewport: window.innerWidth};
}"""


@pytest.fixture(scope="module")
def lab(tmp_path_factory: pytest.TempPathFactory):
    """A JupyterLab server whose root holds one demo copy and notebook per screen size."""
    if not CHROMIUM.exists():
        pytest.skip(f"{CHROMIUM} is missing: install Debian's chromium to run browser tests")
    tmp = tmp_path_factory.mktemp("lab")
    root = tmp / "root"
    root.mkdir()
    for width, height in SIZES:
        name = f"{width}x{height}"
        shutil.copytree(ROOT / "demo_sections", root / f"demo_{name}",
                        ignore=shutil.ignore_patterns("*.autosave.toml"))
        (root / f"workbench_{name}.ipynb").write_text(_packaged_notebook(
            f"open_workbench('demo_{name}/demo.toml', resume=False)"))
    with lab_server(root, tmp / "scratch") as (base, token):
        yield base, token, root


def _packaged_notebook(call: str) -> str:
    """The packaged workbench notebook with its ``open_workbench()`` replaced by ``call``."""
    notebook = json.loads((ROOT / "sectionkit" / "notebooks" / "workbench.ipynb").read_text())
    opened = 0
    for cell in notebook["cells"]:
        source = "".join(cell["source"])
        if cell["cell_type"] == "code" and "open_workbench()" in source:
            cell["source"] = source.replace("open_workbench()", call)
            opened += 1
    assert opened == 1, "workbench.ipynb no longer calls open_workbench()"
    return json.dumps(notebook)


def _in_viewport(page, locator) -> bool:
    box = locator.bounding_box()
    view = page.viewport_size
    return (box is not None and box["y"] >= 0 and box["x"] >= 0
            and box["y"] + box["height"] <= view["height"]
            and box["x"] + box["width"] <= view["width"])


def _open_panel(page, title: str) -> None:
    header = page.locator(".sk-panels .jupyter-widget-Collapse-header", has_text=title)
    header.scroll_into_view_if_needed()
    if "mod-expanded" not in (header.locator("..").get_attribute("class") or "") \
            and "jupyter-widget-Collapse-open" not in (header.locator("..").get_attribute(
                "class") or ""):
        header.click()


@pytest.mark.parametrize("size", SIZES, ids=[f"{w}x{h}" for w, h in SIZES])
def test_workbench_in_the_browser(lab, size):
    from playwright.sync_api import sync_playwright

    base, token, root = lab
    name = f"{size[0]}x{size[1]}"
    shots = ARTIFACTS / f"workbench-{name}"
    shots.mkdir(parents=True, exist_ok=True)
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(CHROMIUM), headless=True,
                                    args=BROWSER_ARGS)
        try:
            page = open_workbench_page(browser, base, token, f"workbench_{name}.ipynb", size)
            page.locator(".sk-workbench").scroll_into_view_if_needed()
            page.screenshot(path=str(shots / "01-opened.png"))

            # ---- the layout fits: nothing sticks out sideways, no label is cut short
            problems = page.evaluate(LAYOUT_PROBLEMS)
            assert problems["overflow"] == [], problems
            assert problems["scroll"] <= 0 and problems["area"] <= 0, problems
            assert problems["right"] <= problems["viewport"], problems
            assert problems["truncated"] == [], problems

            # ---- every control panel fits too
            for title in ("Classes", "Wind", "Inverse", "Session"):
                _open_panel(page, title)
                page.wait_for_timeout(200)
                problems = page.evaluate(LAYOUT_PROBLEMS)
                assert problems["overflow"] == [] and problems["truncated"] == [], (title,
                                                                                    problems)

            # ---- a refused input: the message beside the control, the text kept
            _open_panel(page, "Classes")
            bad = "27.5 @ 0\n27.0 @ 0"
            page.locator(".sk-interfaces textarea").fill(bad)
            page.locator(".sk-interfaces-apply").click()
            error = page.locator(".sk-error-classes")
            error.wait_for(state="visible", timeout=30_000)
            page.wait_for_function(
                "() => document.querySelector('.sk-error-classes').textContent"
                ".includes('refused')", timeout=30_000)
            assert "increase in density" in error.inner_text()
            assert _in_viewport(page, error), error.bounding_box()
            assert page.locator(".sk-interfaces textarea").input_value() == bad
            page.screenshot(path=str(shots / "02-refused-input.png"))

            # ---- the class table follows the slider; one Ctrl+Z undoes the whole move
            _open_panel(page, "Reference")
            table = page.locator(".sk-class-table")
            before = table.inner_text()
            assert "upper" in before and "northward across S01→S47" in before
            handle = page.locator(".sk-reference-slider .noUi-handle")
            handle.scroll_into_view_if_needed()
            handle.focus()
            for _ in range(ARROW_PRESSES):
                handle.press("ArrowRight")
            target = 3000.0 + ARROW_PRESSES * SLIDER_STEP
            page.wait_for_function(
                "(before) => document.querySelector('.sk-class-table').innerText !== before",
                arg=before, timeout=30_000)
            page.wait_for_function(
                "(want) => { const s = document.querySelector('.sk-status').textContent;"
                " return s.includes(want) && s.includes('drawn'); }",
                arg=f"{target:g} dbar", timeout=30_000)
            moved = table.inner_text()
            assert moved != before
            page.screenshot(path=str(shots / "03-slider-moved.png"))
            handle.press("Control+z")
            page.wait_for_function(
                "(want) => document.querySelector('.sk-status').textContent.includes(want)",
                arg=f"undid: reference: level of no motion at {target:g} dbar", timeout=30_000)
            page.wait_for_function(
                "(before) => document.querySelector('.sk-class-table').innerText === before",
                arg=before, timeout=30_000)
            page.screenshot(path=str(shots / "04-undone.png"))
            handle.press("Control+Shift+z")
            page.wait_for_function(
                "() => { const s = document.querySelector('.sk-status').textContent;"
                " return s.includes('redid') && s.includes('drawn'); }", timeout=30_000)

            # ---- the hover readout, and a level chosen on the sensitivity view
            figure = page.locator(".sk-velocity-figure")
            figure.scroll_into_view_if_needed()
            box = figure.bounding_box()
            page.mouse.move(box["x"] + 0.5 * box["width"], box["y"] + 0.5 * box["height"])
            page.wait_for_function(
                "() => document.querySelector('.sk-readout').textContent.includes('dbar')",
                timeout=30_000)
            assert "pair south:" in page.locator(".sk-readout").inner_text()
            page.screenshot(path=str(shots / "04b-readout.png"))
            sens = page.locator(".sk-sensitivity")
            sens.scroll_into_view_if_needed()
            box = sens.bounding_box()
            page.mouse.click(box["x"] + 0.55 * box["width"], box["y"] + 0.5 * box["height"])
            page.wait_for_function(
                "() => { const s = document.querySelector('.sk-status').textContent;"
                " return s.includes('reference: level of no motion at') && !s.includes('3050')"
                " && s.includes('drawn'); }", timeout=30_000)
            page.screenshot(path=str(shots / "04c-sensitivity-pick.png"))
            status = page.locator(".sk-status").inner_text()
            chosen = float(status.split("level of no motion at ")[1].split(" dbar")[0])
            assert 0.0 < chosen < 6000.0

            # ---- a pair chosen on the station map
            groups = page.evaluate("""() => {
              const out = []; let last = null;
              for (const d of document.querySelectorAll('.sk-map .dot')) {
                const mark = d.parentNode.parentNode;
                if (mark !== last) { out.push(0); last = mark; }
                out[out.length - 1] += 1; }
              return out; }""")
            # marks in order: per line its stations, its pairs and its arrow; north is second
            first = sum(groups[:4])
            assert groups[3:5] == [41, 40], groups
            dot = page.locator(".sk-map .dot").nth(first + 12)
            dot.scroll_into_view_if_needed()
            dot.click()
            page.wait_for_function(
                "() => document.querySelector('.sk-pair-info').textContent.includes('north:12')",
                timeout=30_000)
            assert "selected pair north:12" in page.locator(".sk-status").inner_text()
            page.screenshot(path=str(shots / "05-map-pick.png"))
            page.locator(".sk-map").screenshot(path=str(shots / "05-map.png"))

            # ---- the other views, for the record
            for n, css in enumerate((".sk-class-table", ".sk-sensitivity",
                                     ".sk-section-numbers", ".sk-box-budget")):
                page.locator(css).scroll_into_view_if_needed()
                page.screenshot(path=str(shots / f"06-view-{n}.png"))
            page.locator(".sk-collapse", has_text="Inverse").click()
            page.locator(".sk-adjustments").scroll_into_view_if_needed()
            page.wait_for_timeout(500)
            page.screenshot(path=str(shots / "07-inverse.png"))
            for n, css in enumerate((".sk-resolution", ".sk-singular-values", ".sk-residuals")):
                page.locator(css).scroll_into_view_if_needed()
                page.wait_for_timeout(400)  # bqplot draws a figure once it is shown
                page.screenshot(path=str(shots / f"07-inverse-{n}.png"))
            _open_panel(page, "Inverse")
            page.locator(".sk-class-noise").scroll_into_view_if_needed()
            page.screenshot(path=str(shots / "08-inverse-panel.png"))

            # ---- export on a worker thread, with its progress bar
            _open_panel(page, "Session")
            page.locator(".sk-export-folder input").fill(str(root / f"results_{name}"))
            page.locator(".sk-export-figures input").uncheck()
            page.locator(".sk-export").click()
            page.wait_for_function(
                "() => document.querySelector('.sk-status').textContent.includes('exported')",
                timeout=60_000)
            assert page.locator(".sk-export-progress").is_visible()
            page.screenshot(path=str(shots / "09-exported.png"))
        finally:
            browser.close()
    assert (root / f"results_{name}" / "class_transports.csv").is_file() or (
        root / f"results_{name}" / "layer_transports.csv").is_file()
    # the last reference change was autosaved beside the (copied) demo configuration
    autosave = root / f"demo_{name}" / "demo.autosave.toml"
    deadline = time.monotonic() + 10
    while f"pressure = {chosen}" not in (autosave.read_text() if autosave.exists() else ""):
        assert time.monotonic() < deadline, "the reference change was not autosaved"
        time.sleep(0.2)
