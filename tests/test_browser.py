"""The dashboard in a real browser: Voilà serves notebooks/dashboard.ipynb, headless Chromium drives it.

Checks that the plot is drawn; that moving the coupling (keyboard on the slider
handle, or a typed value) changes the rendered plot, the verdict banner and the
readout; that switching the reference to certified bounds says so in the banner
and the readout and redraws the plot; that a typo in the model parameters shows
a message that stays while the shown model keeps working; and that the page logs
no JavaScript error and shows no Python traceback.  One test throws on purpose
to prove the error detector works.  Skipped only when no Chromium executable
exists.
"""

from __future__ import annotations

import time
from pathlib import Path

import pytest

from browser_support import (
    CHROMIUM_ARGS,
    PageWatch,
    canvas_is_drawn,
    find_chromium,
    local_only,
    png_diff_area,
    start_voila,
)

pytestmark = [pytest.mark.browser, pytest.mark.timeout(180)]

CHROMIUM = find_chromium()
if CHROMIUM is None:
    pytest.skip("no Chromium executable found (apt-get install chromium)", allow_module_level=True)

NOTEBOOKS = Path(__file__).resolve().parents[1] / "notebooks"
PLOT = ".widget-tab-contents .jupyter-matplotlib-figure >> visible=true"
CANVAS = ".jupyter-matplotlib-canvas-div canvas"
HANDLE = ".widget-slider .noUi-handle"
MIN_DIFF_AREA = 1000  # px: a moved line and its markers, far above antialiasing noise


@pytest.fixture(scope="module")
def server():
    srv = start_voila(NOTEBOOKS)
    yield srv
    srv.stop()


@pytest.fixture(scope="module")
def browser():
    from playwright.sync_api import sync_playwright

    with sync_playwright() as p:
        b = p.chromium.launch(executable_path=CHROMIUM, headless=True, args=CHROMIUM_ARGS)
        yield b
        b.close()


@pytest.fixture
def page(browser):
    ctx = browser.new_context(viewport={"width": 1600, "height": 1000})
    pg = ctx.new_page()
    pg.route("**/*", local_only)
    watch = PageWatch()
    watch.attach(pg)
    pg.watch = watch
    yield pg
    ctx.close()


def _open_dashboard(page, server, attempts: int = 3) -> None:
    """Load the page until the slider and a drawn plot are there (a reload gets a fresh kernel)."""
    last = None
    for _ in range(attempts):
        try:
            page.goto(server.url("dashboard.ipynb"), timeout=60_000)
            page.wait_for_selector(HANDLE, state="visible", timeout=60_000)
            page.wait_for_selector(PLOT, timeout=30_000)
            t0 = time.monotonic()
            while not canvas_is_drawn(page, CANVAS):
                if time.monotonic() - t0 > 30:
                    raise TimeoutError("the plot canvas stayed blank for 30 s")
                time.sleep(0.2)
            _stable_shot(page)
            return
        except Exception as exc:  # noqa: BLE001 - retried, then re-raised below
            last = exc
    raise AssertionError(f"dashboard did not load in {attempts} attempts: {last}")


def _stable_shot(page, timeout: float = 20.0) -> bytes:
    """Screenshot of the plot once two in a row are identical."""
    prev = page.locator(PLOT).screenshot()
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout:
        time.sleep(0.3)
        cur = page.locator(PLOT).screenshot()
        if cur == prev:
            return cur
        prev = cur
    return prev


def _wait_for_change(page, before: bytes, timeout: float = 20.0) -> int:
    t0 = time.monotonic()
    area = 0
    while time.monotonic() - t0 < timeout:
        area = png_diff_area(before, page.locator(PLOT).screenshot())
        if area > MIN_DIFF_AREA:
            return area
        time.sleep(0.25)
    return area


def _assert_clean(page) -> None:
    assert page.watch.errors == [], page.watch.errors
    assert "Traceback" not in page.inner_text("body")
    assert "Cannot compute this" not in page.inner_text("body")


def _banner(page) -> str:
    return page.locator(".ptcheck-verdict").first.inner_text()


def _wait_text(page, selector: str, needle: str, timeout: float = 20_000) -> None:
    page.wait_for_function(
        "([sel, t]) => [...document.querySelectorAll(sel)].some(e => e.innerText.includes(t))",
        arg=[selector, needle], timeout=timeout,
    )


def test_coupling_moves_change_the_plot_the_verdict_and_the_readout(page, server):
    _open_dashboard(page, server)
    _assert_clean(page)
    box = page.locator(".widget-text:has-text('λ =') input").first
    value0 = box.input_value()
    banner0 = _banner(page)
    before = _stable_shot(page)
    # keyboard on the slider handle: 40 steps of 1/100 of the range (0..2) from λ = 1
    page.locator(HANDLE).first.focus()
    for _ in range(40):
        page.keyboard.press("ArrowRight")
    page.wait_for_function("(old) => { const e = [...document.querySelectorAll('.widget-text input')]"
                           ".find(i => i.closest('.widget-text').innerText.includes('λ =')); return e && e.value !== old; }",
                           arg=value0, timeout=20_000)
    area = _wait_for_change(page, before)
    assert area > MIN_DIFF_AREA, f"the plot did not change after moving the coupling (diff area {area} px)"
    _wait_text(page, ".ptcheck-verdict", "at λ = 1.8")
    assert _banner(page) != banner0
    _wait_text(page, ".widget-html", "At λ = 1.8")
    # a typed value off the slider's step grid is kept exactly (the slider snaps only its handle)
    before = _stable_shot(page)
    box.fill("1.234")
    box.press("Enter")
    area = _wait_for_change(page, before)
    assert area > MIN_DIFF_AREA, f"the plot did not change after typing a coupling (diff area {area} px)"
    _wait_text(page, ".widget-html", "At λ = 1.234")
    _wait_text(page, ".ptcheck-verdict", "at λ = 1.23")
    page.wait_for_timeout(1000)  # the slider's echo of its snapped value must not replace the typed one
    assert "At λ = 1.234" in page.inner_text("body") and box.input_value() == "1.234"
    _assert_clean(page)
    # judged by certified bounds instead: the banner says so, the readout shows brackets, the plot is redrawn
    before = _stable_shot(page)
    ref = page.locator(".widget-dropdown:has-text('reference') select").first
    (label,) = [t for t in ref.locator("option").all_inner_texts() if t.replace("\xa0", " ") == "certified bounds"]
    ref.select_option(label=label)  # the widget may show the label with non-breaking spaces
    _wait_text(page, ".ptcheck-verdict", "judged by certified bounds, no exact solve", timeout=60_000)
    _wait_text(page, ".widget-html", "∈ [")
    area = _wait_for_change(page, before)
    assert area > MIN_DIFF_AREA, f"the plot did not change after switching to certified bounds (diff area {area} px)"
    assert "At λ = 1.234" in page.inner_text("body")  # the coupling stays where it was
    _assert_clean(page)


def test_model_parameter_typo_shows_a_message_that_stays(page, server):
    _open_dashboard(page, server)
    page.locator(".lm-Collapse-header, .p-Collapse-header, .jupyter-widget-Collapse-header").filter(
        has_text="model:").first.click()
    params = page.locator(".widget-textarea:has-text('parameters') textarea").first
    params.wait_for(state="visible", timeout=10_000)
    params.fill("n_photons=five")
    params.press("Tab")  # the box submits when it loses focus
    _wait_text(page, ".widget-html", "The model was not changed")
    text = page.inner_text("body")
    assert "five" in text and "Still showing rabi(n_photons=5)" in text
    # the shown model keeps working and the message stays
    before = _stable_shot(page)
    page.locator(HANDLE).first.focus()
    for _ in range(10):
        page.keyboard.press("ArrowLeft")
    area = _wait_for_change(page, before)
    assert area > MIN_DIFF_AREA, f"the plot did not change after moving the coupling (diff area {area} px)"
    assert "The model was not changed" in page.inner_text("body")
    assert page.watch.errors == [], page.watch.errors
    assert "Traceback" not in page.inner_text("body")


def test_error_detector_sees_a_deliberate_error(page):
    # a page that throws on purpose: the same watcher must report it (else a clean result proves nothing)
    page.set_content("<html><body><p>probe</p><script>"
                     "console.error('deliberate console error');"
                     "setTimeout(() => { throw new Error('deliberate test error'); }, 0);"
                     "</script></body></html>")
    t0 = time.monotonic()
    while len(page.watch.errors) < 2 and time.monotonic() - t0 < 10:
        page.wait_for_timeout(100)
    assert any("deliberate test error" in e for e in page.watch.errors)
    assert any("deliberate console error" in e for e in page.watch.errors)
    with pytest.raises(AssertionError):
        _assert_clean(page)
