"""The browser dashboard (client_examples/dashboard/) in headless Chromium against real servers.

The page is served by ``python -m http.server`` on one loopback port and calls linfer on
another, so it is a cross-origin caller: the API server here is started with
``LINFER_CORS_ORIGINS`` set to the page's origin. The page fits the demo table with
``return_model: true``, draws one SVG interval per coefficient and, when its button is
clicked, asks /v1/predict (kind band) with the model summary for a band over
temperature, the other predictors at their means. Every SVG element carries its
numbers as data attributes; they are compared with the same requests made here
through urllib, to 1e-9 relative. Against the default server (no
LINFER_CORS_ORIGINS) the page must show an error message and draw nothing.

Needs Debian's ``chromium`` and ``chromium-driver`` (/usr/bin/chromium,
/usr/bin/chromedriver) and the ``selenium`` package; each missing one skips with the
reason (CI installs them). No browser is ever downloaded: the driver is the system
one, given by path, so Selenium Manager never runs. Every wait is bounded.
"""

from __future__ import annotations

import json
import math
import os
import signal
import subprocess
import sys
import time
import urllib.error
import urllib.request
from pathlib import Path
from typing import Any, Callable, Iterator

import pytest

from ._server import HOST, OPENER, REPO, Server, free_port

pytestmark = pytest.mark.e2e

CHROMIUM = Path("/usr/bin/chromium")
CHROMEDRIVER = Path("/usr/bin/chromedriver")
EXAMPLES = REPO / "client_examples"
PAGE = "dashboard/index.html"
TABLE_BODY = json.loads((EXAMPLES / "data" / "warehouse_energy_table.json").read_text())
RESULTS = REPO / "tests" / "benchmarks" / "results"
REL = 1e-9
LEVEL = 0.95
BAND_POINTS = 25          # the page's default number of temperatures
WAIT_SECONDS = 30         # the longest any one wait may take
STATIC_START_SECONDS = 15
CHROMIUM_FLAGS = ["--headless=new", "--no-sandbox", "--disable-gpu", "--disable-quic",
                  "--no-first-run", "--disable-background-networking",
                  "--disable-component-update", "--disable-sync", "--no-proxy-server",
                  "--window-size=900,1400"]


# --- helpers ------------------------------------------------------------------------------

def post_json(url: str, body: dict[str, Any]) -> dict[str, Any]:
    request = urllib.request.Request(url, data=json.dumps(body).encode(), method="POST",
                                     headers={"Content-Type": "application/json",
                                              "Accept": "application/json"})
    with OPENER.open(request, timeout=WAIT_SECONDS) as response:
        return json.loads(response.read())


def close(got: float, want: float, where: str) -> None:
    assert math.isclose(got, want, rel_tol=REL, abs_tol=0.0), f"{where}: {got!r} != {want!r}"


def numbers(text: str | None) -> list[float]:
    assert text is not None and text.strip(), f"no numbers in {text!r}"
    return [float(t) for t in text.split()]


def column_mean(values: list[float | None]) -> float:
    """As the page computes it: a left-to-right sum of the non-missing values, one division."""
    present = [v for v in values if v is not None]
    total = 0.0
    for v in present:
        total += v
    return total / len(present)


# --- fixtures -----------------------------------------------------------------------------

class StaticServer:
    """``python -m http.server`` serving client_examples/ on a loopback port."""

    def __init__(self, tmp: Path) -> None:
        self.port = free_port()
        self.origin = f"http://{HOST}:{self.port}"
        self.log = tmp / f"static-{self.port}.log"
        self._log = open(self.log, "wb")
        self.process = subprocess.Popen(
            [sys.executable, "-m", "http.server", "--bind", HOST, "--directory",
             str(EXAMPLES), str(self.port)],
            stdin=subprocess.DEVNULL, stdout=self._log, stderr=subprocess.STDOUT,
            start_new_session=True)

    def ready(self) -> bool:
        deadline = time.monotonic() + STATIC_START_SECONDS
        while time.monotonic() < deadline:
            if self.process.poll() is not None:
                return False
            try:
                with OPENER.open(f"{self.origin}/{PAGE}", timeout=2) as response:
                    if response.status == 200:
                        return True
            except (urllib.error.URLError, OSError):
                pass
            time.sleep(0.1)
        return False

    def stop(self) -> None:
        try:
            if self.process.poll() is None:
                os.killpg(self.process.pid, signal.SIGTERM)
                try:
                    self.process.wait(timeout=10)
                except subprocess.TimeoutExpired:
                    os.killpg(self.process.pid, signal.SIGKILL)
                    self.process.wait(timeout=10)
        finally:
            self._log.close()


@pytest.fixture(scope="module")
def webdriver_module() -> Any:
    if not CHROMIUM.exists():
        pytest.skip(f"{CHROMIUM} is missing: apt-get install chromium chromium-driver "
                    "(CI installs them)")
    if not CHROMEDRIVER.exists():
        pytest.skip(f"{CHROMEDRIVER} is missing: apt-get install chromium-driver "
                    "(CI installs it)")
    return pytest.importorskip("selenium.webdriver",
                               reason="selenium is not installed (pip install selenium)")


@pytest.fixture(scope="module")
def static_server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[StaticServer]:
    server = StaticServer(tmp_path_factory.mktemp("dashboard-static"))
    try:
        if not server.ready():
            pytest.fail(f"python -m http.server did not serve {PAGE} within "
                        f"{STATIC_START_SECONDS} s:\n{server.log.read_text(errors='replace')}",
                        pytrace=False)
        yield server
    finally:
        server.stop()


@pytest.fixture(scope="module")
def cors_server(start_server: Callable[..., Server], static_server: StaticServer) -> Server:
    """A linfer server that allows the page's origin (and only it)."""
    return start_server(env={"LINFER_CORS_ORIGINS": static_server.origin},
                        label="cors-dashboard")


@pytest.fixture(scope="module")
def browser(webdriver_module: Any, tmp_path_factory: pytest.TempPathFactory) -> Iterator[Any]:
    from selenium.webdriver.chrome.service import Service

    tmp = tmp_path_factory.mktemp("chromium")
    options = webdriver_module.ChromeOptions()
    options.binary_location = str(CHROMIUM)
    for flag in CHROMIUM_FLAGS:
        options.add_argument(flag)
    options.add_argument(f"--user-data-dir={tmp / 'profile'}")
    options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    service = Service(str(CHROMEDRIVER), log_output=str(tmp / "chromedriver.log"))
    driver = webdriver_module.Chrome(options=options, service=service)
    try:
        driver.set_page_load_timeout(WAIT_SECONDS)
        driver.set_script_timeout(WAIT_SECONDS)
        yield driver
    finally:
        driver.quit()


def open_page(driver: Any, static: StaticServer, api: str) -> None:
    driver.get(f"{static.origin}/{PAGE}?api={api}")


def wait_for(driver: Any, what: str, condition: Callable[[Any], Any],
             timeout: float = WAIT_SECONDS) -> Any:
    """``condition(driver)`` once truthy, polled; fails with the page's state after ``timeout``."""
    from selenium.common.exceptions import TimeoutException
    from selenium.webdriver.support.ui import WebDriverWait

    try:
        return WebDriverWait(driver, timeout, poll_frequency=0.1).until(condition)
    except TimeoutException:
        status = driver.execute_script(
            "const s = document.getElementById('status'), e = document.getElementById('error');"
            "return [s && s.dataset.state, s && s.textContent, e && e.textContent];")
        logs = driver.get_log("browser")
        pytest.fail(f"waited {timeout} s for {what}; status {status!r}; console {logs!r}",
                    pytrace=False)


def page_state(driver: Any) -> str | None:
    return driver.execute_script("return document.getElementById('status').dataset.state;")


def settled(driver: Any) -> str | None:
    state = page_state(driver)
    return state if state in ("ready", "error") else None


# --- the reference numbers, through urllib ------------------------------------------------

@pytest.fixture(scope="module")
def reference_fit(cors_server: Server) -> dict[str, Any]:
    """The fit the page makes, made here: the demo table, levels [0.95], return_model."""
    return post_json(cors_server.base_url + "/v1/fit",
                     {**TABLE_BODY, "levels": [LEVEL], "return_model": True})


# --- tests --------------------------------------------------------------------------------

def test_dashboard_draws_the_coefficient_intervals(browser: Any, static_server: StaticServer,
                                                   cors_server: Server,
                                                   reference_fit: dict[str, Any]) -> None:
    from selenium.webdriver.common.by import By

    open_page(browser, static_server, cors_server.base_url)
    assert wait_for(browser, "the fit to be drawn", settled) == "ready", \
        browser.find_element(By.ID, "error").text
    assert browser.title.startswith("linfer dashboard")
    assert browser.find_element(By.ID, "error").get_attribute("data-visible") == "false"

    coefficients = reference_fit["coefficients"]
    groups = browser.find_elements(By.CSS_SELECTOR, "#coef-svg g.coef")
    lines = browser.find_elements(By.CSS_SELECTOR, "#coef-svg line.ci")
    dots = browser.find_elements(By.CSS_SELECTOR, "#coef-svg circle.estimate")
    assert len(groups) == len(lines) == len(dots) == len(coefficients) == 4

    for group, line, dot, want in zip(groups, lines, dots, coefficients):
        name = want["name"]
        (interval,) = want["intervals"]
        assert interval["level"] == LEVEL
        assert group.get_attribute("data-name") == name
        assert group.find_element(By.CSS_SELECTOR, "text.coef-label").text == name
        for element, label in ((group, "group"), (line, "line")):
            close(float(element.get_attribute("data-lower")), interval["lower"],
                  f"{name} lower ({label})")
            close(float(element.get_attribute("data-upper")), interval["upper"],
                  f"{name} upper ({label})")
        close(float(dot.get_attribute("data-estimate")), want["estimate"], f"{name} estimate")
        close(float(group.get_attribute("data-estimate")), want["estimate"],
              f"{name} estimate (group)")
        # Drawn in order: lower end left of the dot, the dot left of the upper end.
        x1, x2 = float(line.get_attribute("x1")), float(line.get_attribute("x2"))
        assert x1 <= float(dot.get_attribute("cx")) <= x2, name

    # Every element inside a coefficient's group carries the number(s) it shows.
    for element in browser.find_elements(By.CSS_SELECTOR, "#coef-svg g.coef > *"):
        attributes = browser.execute_script(
            "return Array.from(arguments[0].attributes).map(a => a.name)"
            ".filter(n => n.startsWith('data-'));", element)
        assert attributes, element.get_attribute("outerHTML")


def test_dashboard_draws_the_band_on_demand(browser: Any, static_server: StaticServer,
                                            cors_server: Server,
                                            reference_fit: dict[str, Any]) -> None:
    from selenium.webdriver.common.by import By

    open_page(browser, static_server, cors_server.base_url)
    assert wait_for(browser, "the fit to be drawn", settled) == "ready", \
        browser.find_element(By.ID, "error").text
    band_svg = browser.find_element(By.ID, "band-svg")
    assert band_svg.get_attribute("data-state") == "empty"
    assert not browser.find_elements(By.CSS_SELECTOR, "#band-svg path.band")

    browser.find_element(By.ID, "band-button").click()
    wait_for(browser, "the band to be drawn",
             lambda d: d.find_element(By.ID, "band-svg").get_attribute("data-state")
             in ("drawn", "error"))
    assert band_svg.get_attribute("data-state") == "drawn", \
        browser.find_element(By.ID, "error").text

    band = browser.find_element(By.CSS_SELECTOR, "#band-svg path.band")
    mean_line = browser.find_element(By.CSS_SELECTOR, "#band-svg polyline.mean-line")
    points = browser.find_elements(By.CSS_SELECTOR, "#band-svg circle.band-point")
    assert band.get_attribute("data-kind") == "band"
    assert float(band.get_attribute("data-level")) == LEVEL
    temps = numbers(band.get_attribute("data-temps"))
    assert len(temps) == len(points) == BAND_POINTS
    assert numbers(mean_line.get_attribute("data-temps")) == temps

    # The range the page offers by default: the observed temperatures, evenly spaced.
    observed = TABLE_BODY["table"]["temp_c"]
    lo, hi = min(observed), max(observed)
    for i, t in enumerate(temps):
        close(t, lo + (hi - lo) * i / (BAND_POINTS - 1), f"temperature {i}")

    # The same rows, asked here: temp_c varies, the other predictors at their means.
    model = reference_fit["model"]
    predictors = [n for n in model["names"] if not (model["intercept"] and n == "intercept")]
    assert predictors == ["temp_c", "door_openings", "pallets_received"]
    means = {n: column_mean(TABLE_BODY["table"][n]) for n in predictors}
    rows = [[t if n == "temp_c" else means[n] for n in predictors] for t in temps]
    want = post_json(cors_server.base_url + "/v1/predict",
                     {"model": model, "new_rows": rows, "kind": "band", "levels": [LEVEL]})
    assert want["kind"] == "band"
    predictions = want["predictions"]
    assert len(predictions) == BAND_POINTS

    lower = numbers(band.get_attribute("data-lower"))
    upper = numbers(band.get_attribute("data-upper"))
    mean = numbers(band.get_attribute("data-estimate"))
    line_mean = numbers(mean_line.get_attribute("data-estimate"))
    for i, (p, point) in enumerate(zip(predictions, points)):
        (interval,) = p["intervals"]
        assert interval["level"] == LEVEL
        close(lower[i], interval["lower"], f"band lower {i}")
        close(upper[i], interval["upper"], f"band upper {i}")
        close(mean[i], p["mean"], f"band mean {i}")
        close(line_mean[i], p["mean"], f"mean line {i}")
        close(float(point.get_attribute("data-temp")), temps[i], f"point {i} temperature")
        close(float(point.get_attribute("data-lower")), interval["lower"], f"point {i} lower")
        close(float(point.get_attribute("data-upper")), interval["upper"], f"point {i} upper")
        close(float(point.get_attribute("data-estimate")), p["mean"], f"point {i} mean")
        assert interval["lower"] < p["mean"] < interval["upper"]

    # The band is simultaneous: wider than the pointwise 95% interval for the mean.
    pointwise = post_json(cors_server.base_url + "/v1/predict",
                          {"model": model, "new_rows": rows, "kind": "mean",
                           "levels": [LEVEL]})["predictions"]
    for i, (b, m) in enumerate(zip(predictions, pointwise)):
        assert b["intervals"][0]["upper"] - b["intervals"][0]["lower"] > \
            m["intervals"][0]["upper"] - m["intervals"][0]["lower"], i

    # A screenshot for a person to look at (tests/benchmarks/results/ is not committed).
    RESULTS.mkdir(parents=True, exist_ok=True)
    assert browser.save_screenshot(str(RESULTS / "dashboard.png"))


def test_dashboard_without_cors_shows_an_error(browser: Any, static_server: StaticServer,
                                               served: Server) -> None:
    """The default server does not allow the page's origin: a message, nothing drawn."""
    from selenium.webdriver.common.by import By

    open_page(browser, static_server, served.base_url)
    assert wait_for(browser, "the page to give up", settled) == "error"
    error = browser.find_element(By.ID, "error")
    assert error.get_attribute("data-visible") == "true"
    assert error.is_displayed()
    message = error.text
    assert "LINFER_CORS_ORIGINS" in message and static_server.origin in message, message
    assert "does not allow this page's origin" in message, message
    assert not browser.find_elements(By.CSS_SELECTOR, "#coef-svg g.coef")
    assert not browser.find_elements(By.CSS_SELECTOR, "#coef-svg line.ci")
    assert not browser.find_elements(By.CSS_SELECTOR, "#band-svg path.band")
    assert browser.find_element(By.ID, "band-button").get_attribute("disabled") is not None
    RESULTS.mkdir(parents=True, exist_ok=True)
    assert browser.save_screenshot(str(RESULTS / "dashboard-cors-off.png"))


def test_dashboard_shows_the_problem_of_an_error_answer(browser: Any,
                                                        static_server: StaticServer,
                                                        cors_server: Server) -> None:
    """A 4xx from the API (here: a response column the data lack) is shown, with its pointer."""
    from selenium.webdriver.common.by import By

    open_page(browser, static_server, cors_server.base_url)
    assert wait_for(browser, "the fit to be drawn", settled) == "ready"
    # A band over an empty range is refused by the page itself, before any request.
    browser.execute_script("document.getElementById('t-to').value ="
                           " document.getElementById('t-from').value;")
    browser.find_element(By.ID, "band-button").click()
    wait_for(browser, "the page to refuse the range",
             lambda d: d.find_element(By.ID, "band-svg").get_attribute("data-state") == "error")
    assert "from < to" in browser.find_element(By.ID, "error").text

    # A model summary the service refuses: its problem detail reaches the page.
    browser.execute_script("window.linferDashboard.model.version = 99;"
                           "document.getElementById('t-to').value = '30';")
    browser.find_element(By.ID, "band-button").click()
    wait_for(browser, "the refused band's problem",
             lambda d: d.find_element(By.ID, "error").text.startswith("422 "))
    assert browser.find_element(By.ID, "band-svg").get_attribute("data-state") == "error"
    message = browser.find_element(By.ID, "error").text
    assert message.startswith("422 "), message
    assert "/model/version" in message, message
    assert not browser.find_elements(By.CSS_SELECTOR, "#band-svg path.band")


def test_dashboard_without_a_server_says_so(browser: Any, static_server: StaticServer) -> None:
    """Nothing listens at the address: the page says it could not reach linfer there."""
    from selenium.webdriver.common.by import By

    nowhere = f"http://{HOST}:{free_port()}"
    open_page(browser, static_server, nowhere)
    assert wait_for(browser, "the page to give up", settled) == "error"
    message = browser.find_element(By.ID, "error").text
    assert message.startswith(f"Could not reach linfer at {nowhere}"), message
    assert not browser.find_elements(By.CSS_SELECTOR, "#coef-svg g.coef")
