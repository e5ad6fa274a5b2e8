"""Every page per role in a real headless Chromium at 1,024 and 1,400 px wide,
on the demo fleet: each is saved as a screenshot (var/test-artifacts/
screenshots/, whole page) and checked for what a busy technician or desk
clerk needs to act on it:

- it opens (no error page) with the app's own top bar;
- nothing is cut off: the page does not scroll sideways, and no card hides
  a column behind its own scroll bar;
- on the workshop page the "what to do, and why" column is wide enough to
  read, and on the unit page the action comes first.

Needs Debian's chromium and chromedriver (``.ci/run`` installs them); without
them the test is skipped, or fails under ``CI=true``.
"""

import base64
import os
import re
import shutil
import tempfile
from pathlib import Path

import pytest

pytestmark = [pytest.mark.browser, pytest.mark.django_db(transaction=True)]

ROOT = Path(__file__).resolve().parents[2]
SHOTS = ROOT / "var" / "test-artifacts" / "screenshots"
WIDTHS = (1024, 1400)
CHROMIUM, CHROMEDRIVER = "/usr/bin/chromium", "/usr/bin/chromedriver"


def _browser(width):
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    options = webdriver.ChromeOptions()
    options.binary_location = CHROMIUM
    profile = tempfile.mkdtemp(prefix="recap-chromium-")
    for arg in ("--headless=new", "--no-sandbox", "--disable-dev-shm-usage", "--disable-gpu",
                "--disable-background-networking", "--disable-component-update", "--disable-sync",
                "--no-first-run", f"--user-data-dir={profile}", f"--window-size={width},900"):
        options.add_argument(arg)
    driver = webdriver.Chrome(service=Service(CHROMEDRIVER), options=options)
    driver.set_page_load_timeout(30)
    driver._recap_profile = profile
    return driver


@pytest.fixture
def chromium():
    missing = [p for p in (CHROMIUM, CHROMEDRIVER) if not os.path.exists(p)]
    try:
        import selenium  # noqa: F401
    except ImportError:
        missing.append("the selenium package")
    if missing:
        message = f"headless browser test needs {', '.join(missing)}"
        if os.environ.get("CI", "").lower() == "true":
            pytest.fail(message + " (CI must provide it)")
        pytest.skip(message)
    drivers = []

    def open_browser(width):
        driver = _browser(width)
        drivers.append(driver)
        return driver

    yield open_browser
    for driver in drivers:
        driver.quit()
        shutil.rmtree(driver._recap_profile, ignore_errors=True)


@pytest.fixture
def demo():
    """The demo fleet, forecast, with its three logins."""
    from fixtures.demo_fleet import DEMO_USERS, add_demo_override, build_demo_fleet, create_demo_users
    from scheduling.services import forecast_refresh

    build_demo_fleet()
    forecast_refresh()
    create_demo_users()
    add_demo_override()
    return {role: (name, password) for name, password, role, _ in DEMO_USERS}


def _pages(role):
    """(name, address) of every page the role works with, on units chosen from the demo."""
    from django.urls import reverse

    from fleet.models import Rental, Unit
    from scheduling.models import UnitForecast

    first = UnitForecast.objects.filter(priority=1).select_related("unit").first().unit.asset_tag
    tube = Unit.objects.filter(gear_model__hazard_tube_hv=True).exclude(status="retired").first().asset_tag
    held = Unit.objects.filter(status=Unit.Status.HOLD).first().asset_tag
    available = Unit.objects.filter(status=Unit.Status.AVAILABLE).first().asset_tag
    out = Rental.objects.filter(in_at__isnull=True).select_related("unit").first().unit.asset_tag
    common = [("start", reverse("home")), ("units", reverse("unit_list")),
              ("not-found", reverse("unit_detail", args=["NO-SUCH-1"]))]
    if role == "desk":
        return common + [("unit-card-held", reverse("unit_detail", args=[held])),
                         ("unit-card-out", reverse("unit_detail", args=[out])),
                         ("check-out", reverse("check_out") + f"?tag={available}"),
                         ("check-in", reverse("check_in") + f"?tag={out}")]
    tech = [("workshop", reverse("workshop")),
            ("workshop-page-2", reverse("workshop") + "?page=2"),
            ("workshop-by-role", reverse("workshop") + "?role=pump_flying"),
            ("unit-first", reverse("unit_detail", args=[first])),
            ("unit-held", reverse("unit_detail", args=[held])),
            ("unit-tube", reverse("unit_detail", args=[tube])),
            ("unit-by-role", reverse("unit_detail", args=[tube]) + "?view=role")]
    if role == "technician":
        return common + tech
    return common + tech[:1] + tech[3:4] + [
        ("import-export", reverse("csv_import")),
        ("admin", reverse("admin:index")),
        ("admin-hires", reverse("admin:fleet_rental_changelist")),
        ("admin-gear-models", reverse("admin:fleet_gearmodel_changelist")),
        ("admin-service-records", reverse("admin:fleet_servicerecord_changelist")),
    ]


def _login(driver, base, username, password):
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support import expected_conditions as EC
    from selenium.webdriver.support.ui import WebDriverWait

    driver.get(base + "/accounts/login/")
    driver.find_element(By.NAME, "username").send_keys(username)
    driver.find_element(By.NAME, "password").send_keys(password)
    driver.find_element(By.CSS_SELECTOR, "form [type=submit]").click()
    WebDriverWait(driver, 15).until(EC.url_changes(base + "/accounts/login/"))


def _save(driver, path):
    """The whole page, not only the window (Chrome DevTools: beyond the viewport)."""
    size = driver.execute_script("return [document.documentElement.scrollWidth, "
                                 "document.documentElement.scrollHeight]")
    shot = driver.execute_cdp_cmd("Page.captureScreenshot", {
        "format": "png", "captureBeyondViewport": True,
        "clip": {"x": 0, "y": 0, "width": size[0], "height": size[1], "scale": 1}})
    path.write_bytes(base64.b64decode(shot["data"]))


#: Cards (and the page) whose content is wider than they are: what is cut off.
OVERFLOW = """
const out = [];
const doc = document.documentElement;
if (doc.scrollWidth > doc.clientWidth + 1) out.push('page ' + doc.scrollWidth + ' > ' + doc.clientWidth);
for (const el of document.querySelectorAll('.block, .panel, main')) {
  if (el.scrollWidth > el.clientWidth + 1) {
    const h = el.querySelector('h1, h2');
    out.push((h ? h.textContent.trim() : el.className) + ': ' + el.scrollWidth + ' > ' + el.clientWidth);
  }
}
return out;
"""


@pytest.mark.parametrize("role", ["desk", "technician", "manager"])
def test_every_page_per_role_fits_and_is_saved(role, demo, chromium, live_server):
    SHOTS.mkdir(parents=True, exist_ok=True)
    problems = []
    pages = _pages(role)
    for width in WIDTHS:
        driver = chromium(width)
        _login(driver, live_server.url, *demo[role])
        for name, address in pages:
            driver.get(live_server.url + address)
            text = driver.find_element("tag name", "body").text
            where = f"{role} {name} at {width} px"
            if "Server Error" in text or "Traceback" in text:
                problems.append(f"{where}: error page")
            if name.startswith("admin"):
                if "Recap Scheduler" not in driver.title:
                    problems.append(f"{where}: not in the app's look")
            else:
                # one way of writing units and dates on the app's own pages
                for pattern, what in ((r"\buF\b", "uF for µF"), (r"\bohm\b", "ohm for Ω"), (r"degC", "degC for °C"),
                                      (r"\b\d{4}-\d{2}-\d{2}\b", "an ISO date"), (r"999 ?%", "a 999 % figure"),
                                      (r"\b0\d [A-Z][a-z]{2} \d{4}", "a zero-padded day")):
                    found = re.search(r".{0,30}" + pattern + r".{0,10}", text)
                    if found:
                        problems.append(f"{where}: {what}: {found.group(0)!r}")
                if not driver.find_elements("css selector", ".topbar .brand"):
                    problems.append(f"{where}: no top bar")
            for cut in driver.execute_script(OVERFLOW):
                problems.append(f"{where}: cut off: {cut}")
            if name == "workshop":
                widths = driver.execute_script(
                    "return [...document.querySelectorAll('table.triage td.todo')].map(td => td.clientWidth)")
                if widths and min(widths) < 250:
                    problems.append(f"{where}: 'what to do' column only {min(widths)} px wide")
            if name.startswith("unit-") and role != "desk":
                first = driver.execute_script(
                    "const th = document.querySelector('table.caps thead th'); return th && th.textContent")
                if not (first or "").startswith("Action"):
                    problems.append(f"{where}: the capacitor table does not start with the action")
            _save(driver, SHOTS / f"{role}-{name}-{width}.png")
    assert not problems, "\n".join(problems)
    saved = {p.name for p in SHOTS.glob(f"{role}-*.png")}
    assert {f"{role}-{name}-{w}.png" for name, _ in pages for w in WIDTHS} <= saved
