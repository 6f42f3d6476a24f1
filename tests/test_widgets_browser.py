"""The explore notebook in a real browser: JupyterLab, headless Chromium, the network blocked.

What only a browser shows: the map, the histogram and the table render; the time slider moves
from the keyboard and both the page and the kernel then show the same new stroke count.
"""

from __future__ import annotations

import re
import shutil
import time

import pytest

from conftest import EXAMPLE_EVENT, ROOT
from jupyter_fixture import start_lab, stop_lab

pytestmark = pytest.mark.browser

KERNEL_READY_JS = """() => {
  const w = window.jupyterapp && window.jupyterapp.shell.currentWidget;
  const k = w && w.sessionContext && w.sessionContext.session && w.sessionContext.session.kernel;
  return !!k && k.connectionStatus === 'connected' && k.status === 'idle';
}"""

# The window label (count and times) differs from `text`: the window moved and the kernel answered.
WINDOW_MOVED_JS = """(text) => {
  const el = document.querySelector('.debrief-window-label');
  return !!el && el.innerText !== text;
}"""

EXECUTE_JS = """async (code) => {
  const k = window.jupyterapp.shell.currentWidget.sessionContext.session.kernel;
  const future = k.requestExecute({code, silent: false, store_history: false});
  let out = '';
  future.onIOPub = (msg) => {
    if (msg.header.msg_type === 'stream') out += msg.content.text;
    if (msg.header.msg_type === 'error') out += 'ERROR ' + msg.content.ename + ': ' + msg.content.evalue;
  };
  await future.done;
  return out;
}"""


@pytest.fixture(scope="module")
def lab(tmp_path_factory):
    if not (EXAMPLE_EVENT / "strokes.csv").exists():
        pytest.skip("example_event/ has no strokes.csv yet (python -m debrief.synth example_event)")
    root = tmp_path_factory.mktemp("lab_root")
    (root / "templates").mkdir()
    shutil.copy(ROOT / "templates" / "explore.ipynb", root / "templates" / "explore.ipynb")
    shutil.copytree(EXAMPLE_EVENT, root / "example_event")
    server = start_lab(root, tmp_path_factory.mktemp("lab_home"), extra_env={"PYTHONPATH": str(ROOT)})
    try:
        yield server
    finally:
        stop_lab(server)


def _count(text: str) -> int:
    m = re.search(r"([\d,]+) strokes in window", text)
    assert m, f"no stroke count in {text!r}"
    return int(m.group(1).replace(",", ""))


def test_explore_notebook_renders_and_slider_moves(lab, offline_page, artifacts):
    t_start = time.monotonic()
    page = offline_page.page
    page.set_default_timeout(60_000)
    page.set_viewport_size({"width": 1500, "height": 2000})  # the whole dashboard in one view
    page.goto(lab.url("lab/tree/templates/explore.ipynb"))
    page.wait_for_function(KERNEL_READY_JS, timeout=90_000)
    page.evaluate("() => window.jupyterapp.shell.collapseLeft()")
    lab.kernel_pids.append(int(page.evaluate(EXECUTE_JS, "import os; print(os.getpid())").strip()))
    page.evaluate("() => window.jupyterapp.commands.execute('notebook:run-all-cells')")

    leaflet = page.locator(".leaflet-container").first
    leaflet.wait_for(state="visible")
    page.locator(".bqplot svg").first.wait_for(state="visible")
    page.locator(".debrief-mult-cell").first.wait_for(state="visible")
    label = page.locator(".debrief-count").first
    label.wait_for(state="visible")
    # Drawn strokes reach the page: canvas-rendered circle markers live in the overlay pane.
    page.wait_for_function("() => document.querySelectorAll('.leaflet-overlay-pane canvas, .leaflet-overlay-pane path').length > 0")
    before_page = _count(label.inner_text())
    before_kernel = page.evaluate(EXECUTE_JS, "print(len(dashboard.state.window_tables()[0]), dashboard.map.n_window)")
    assert [int(v) for v in before_kernel.split()] == [before_page, before_page], before_kernel
    dash = page.locator(".debrief-dashboard").first
    dash.scroll_into_view_if_needed()
    dash.screenshot(path=str(artifacts / "explore_dashboard.png"))

    handle = page.locator(".debrief-time-slider .noUi-handle").first
    handle.scroll_into_view_if_needed()
    handle.focus()
    counts = [before_page]
    window_label = page.locator(".debrief-window-label").first
    for key, want_pos in (("ArrowRight", 1), ("ArrowRight", 2), ("ArrowLeft", 1)):
        text = window_label.inner_text()
        page.keyboard.press(key)
        page.wait_for_function(WINDOW_MOVED_JS, arg=text)
        shown = _count(label.inner_text())
        kernel = page.evaluate(EXECUTE_JS, "m = dashboard.map; print(dashboard.time.slider.value,"
                                           " len(dashboard.state.window_tables()[0]), m.n_window, m.n_view, len(m.drawn_stroke_ids()))")
        slider_pos, n_window, n_map, n_view, n_drawn = (int(v) for v in kernel.split())
        # Page and kernel agree; the map draws every stroke of the window that is in its view.
        assert (slider_pos, n_window, n_map, n_drawn) == (want_pos, shown, shown, n_view) and n_view > 0
        counts.append(shown)
    assert counts[1] != counts[0] and counts[3] == counts[1]  # back one step: the same window again
    leaflet.screenshot(path=str(artifacts / "explore_map.png"))
    page.locator(".bqplot").first.screenshot(path=str(artifacts / "explore_histogram.png"))
    dash.screenshot(path=str(artifacts / "explore_after_steps.png"))

    # The whole event is more than the map draws one by one: counts per cell instead.
    text = window_label.inner_text()
    mode = page.evaluate(EXECUTE_JS, "dashboard.time.width.value = 0; print(dashboard.map.mode, len(dashboard.map.cells_layer.data['features']))")
    page.wait_for_function(WINDOW_MOVED_JS, arg=text)
    assert mode.split()[0] == "cells" and int(mode.split()[1]) > 0
    page.wait_for_timeout(300)
    leaflet.screenshot(path=str(artifacts / "explore_map_cells.png"))

    # Site check from the page: open the tab, pick the first site, press the button.
    page.locator(".lm-TabBar-tab", has_text="site check").first.click()
    page.locator(".debrief-site-pick select").first.select_option(index=1)
    page.locator(".debrief-site-check").first.click()
    sentence = page.locator(".debrief-site-sentence").first
    sentence.wait_for(state="visible")
    site_name = page.evaluate(EXECUTE_JS, "print(dashboard.state.site['name'])").strip()
    assert site_name in sentence.inner_text() and "located within" in sentence.inner_text()
    page.wait_for_timeout(500)
    page.locator(".debrief-site-panel").first.screenshot(path=str(artifacts / "explore_site_panel.png"))
    leaflet.screenshot(path=str(artifacts / "explore_map_site.png"))

    assert offline_page.blocked == [], offline_page.blocked  # no tiles, fonts or scripts from outside
    assert not [e for e in offline_page.console_errors if "Traceback" in e or "widget" in e.lower()], offline_page.console_errors
    assert time.monotonic() - t_start < 90
