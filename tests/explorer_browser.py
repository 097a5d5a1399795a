"""Driving explorer.html in Debian's chromium with playwright: the machinery of
the browser tests, also used by scripts/make_explorer_screenshot.py (the README's
picture) and scripts/bench.py (load times).

Playwright is only the driver: it never downloads a browser here; the page runs
in /usr/bin/chromium (the Debian package that .ci/run installs). Every request
the page makes is recorded, and any that is not to a local file, a data: or a
blob: URL is refused, so a page that needed the network would show it.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import time

CHROMIUM = "/usr/bin/chromium"
ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking",
        "--disable-component-update", "--no-first-run", "--disable-sync"]
REQUIRE_ENV = "TIMINGKIT_REQUIRE_BROWSER"     # set by .ci/run: fail instead of skipping
LOCAL = ("file:", "data:", "blob:")


def browser_problem() -> str | None:
    """Why the page cannot be checked in a real browser here, or None."""
    try:
        import playwright.sync_api  # noqa: F401
    except ImportError:
        return "the Python package 'playwright' is not installed (pip install '.[test]')"
    if not (os.path.exists(CHROMIUM) or shutil.which("chromium")):
        return f"no chromium at {CHROMIUM} (Debian package 'chromium'; .ci/run installs it)"
    return None


@contextlib.contextmanager
def open_browser():
    from playwright.sync_api import sync_playwright
    executable = CHROMIUM if os.path.exists(CHROMIUM) else shutil.which("chromium")
    with sync_playwright() as driver:
        browser = driver.chromium.launch(executable_path=executable, args=ARGS, headless=True)
        try:
            yield browser
        finally:
            browser.close()


class ExplorerPage:
    """One explorer page open in ``browser``: console errors, requests, and the
    moves a person makes (drag a box or a lasso, hover, download)."""

    def __init__(self, browser, path, width: int = 1200, height: int = 800):
        self.context = browser.new_context(viewport={"width": width, "height": height},
                                           accept_downloads=True)
        self.page = self.context.new_page()
        self.errors: list[str] = []
        self.requests: list[str] = []
        self.refused: list[str] = []
        self.page.on("console", lambda m: m.type == "error" and self.errors.append(m.text))
        self.page.on("pageerror", lambda e: self.errors.append(str(e)))
        self.page.on("request", lambda r: self.requests.append(r.url))
        self.context.route("**/*", self._route)
        start = time.perf_counter()
        self.page.goto(f"file://{os.path.abspath(path)}")
        self.page.wait_for_selector("body[data-explorer=ready]", timeout=120_000)
        self.settle()
        self.load_s = time.perf_counter() - start

    def _route(self, route):
        if route.request.url.startswith(LOCAL):
            route.continue_()
        else:
            self.refused.append(route.request.url)
            route.abort()

    def settle(self) -> None:
        """Wait until the browser has drawn two more frames."""
        self.page.evaluate("new Promise(r => requestAnimationFrame(() => requestAnimationFrame(r)))")

    def status(self) -> dict:
        return self.page.evaluate("timingkitExplorer.status()")

    def plotted(self, column: str) -> list:
        return self.page.evaluate(
            f"Array.from(Bokeh.documents[0].get_model_by_name('toas').data['{column}'])")

    def to_screen(self, x: float, y: float) -> tuple[float, float]:
        f = self.page.evaluate("timingkitExplorer.frame()")
        return (f["left"] + (x - f["x"][0]) / (f["x"][1] - f["x"][0]) * f["width"],
                f["top"] + (f["y"][1] - y) / (f["y"][1] - f["y"][0]) * f["height"])

    def frame(self) -> dict:
        return self.page.evaluate("timingkitExplorer.frame()")

    def drag(self, points) -> None:
        """Press at the first page point, move through the others, release."""
        mouse = self.page.mouse
        mouse.move(*points[0])
        mouse.down()
        for point in points[1:]:
            mouse.move(*point, steps=4)
        mouse.up()
        self.settle()

    def box_between(self, x0: float, x1: float) -> None:
        """Drag a box from data x0 to x1 over the whole height of the plot."""
        f = self.frame()
        left, _ = self.to_screen(x0, 0.0)
        right, _ = self.to_screen(x1, 0.0)
        self.drag([(left, f["top"] + 2), (right, f["top"] + f["height"] - 2)])

    def choose(self, select_id: str, value: str) -> None:
        self.page.select_option(f"#{select_id}", value)
        self.settle()

    def download(self, path) -> str:
        with self.page.expect_download() as info:
            self.page.click("#tk-download")
        info.value.save_as(str(path))
        return str(path)

    def screenshot(self, path) -> None:
        self.settle()
        self.page.screenshot(path=str(path))

    def close(self) -> None:
        self.context.close()
