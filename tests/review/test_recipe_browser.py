"""The recipe page in a real browser (headless Debian Chromium through Selenium, as test_browser.py).

The quality engineer's round on a new part: open the page from the front page, drag a rectangle, drag
a circular exclusion inside it, take the measured lay, save; then ``surfinspect check`` accepts the
file and ``surfinspect inspect`` accepts the reference photo with it and prints the lay the page
showed. Editing: the CP-14 demo recipe loads, saves unchanged as the next revision (the old file kept),
a typed coordinate moves the drawn region, and a wrong value shows the message ``check`` prints and
blocks saving. Screenshots go to ``<tmp>/screenshots``.
"""

from __future__ import annotations

import json
import shutil

import pytest
from browser_helpers import by_css, chromium, running_server, tab_order, unnamed_controls
from review_helpers import ROOT, run_cli

from surfinspect.formatting import format_angle
from surfinspect.recipe import load_recipe
from surfinspect.review.app import ReviewConfig

pytestmark = pytest.mark.browser
WAIT_S = 20


def wait(driver, what, timeout=WAIT_S):
    from selenium.webdriver.support.ui import WebDriverWait

    return WebDriverWait(driver, timeout).until(what)


@pytest.fixture
def page(tmp_path):
    """A station on loopback with the recipe page on a demo photo, and the browser; yields a starter."""
    started = []

    def start(image: str, recipe: str | None = None):
        folder = tmp_path / "recipes"
        folder.mkdir()
        existing = None
        if recipe:
            existing = folder / recipe
            shutil.copy(ROOT / "recipes" / recipe, existing)
        config = ReviewConfig(None, recipe_image=ROOT / "demo_parts" / image, recipe_file=existing, recipe_dir=folder)
        server = running_server(config)
        url = server.__enter__()
        browser = chromium(tmp_path / "profile")
        driver = browser.__enter__()
        started.extend([browser, server])
        shots = tmp_path / "screenshots"
        shots.mkdir()
        return url, driver, folder, shots

    yield start
    for ctx in started:
        ctx.__exit__(None, None, None)


def screen_point(driver, x: float, y: float) -> tuple[float, float]:
    """Offset from the viewer's centre (what Selenium's pointer moves take) of image pixel (x, y)."""
    v = by_css(driver, "#rp-viewer")
    s, tx, ty = (float(v.get_attribute(f"data-{k}")) for k in ("scale", "x", "y"))
    return tx + x * s - v.size["width"] / 2, ty + y * s - v.size["height"] / 2


def drag(driver, start, end) -> None:
    from selenium.webdriver.common.action_chains import ActionChains

    viewer = by_css(driver, "#rp-viewer")
    (x0, y0), (x1, y1) = screen_point(driver, *start), screen_point(driver, *end)
    chain = ActionChains(driver).move_to_element_with_offset(viewer, int(x0), int(y0)).click_and_hold()
    chain.move_by_offset(int((x1 - x0) / 2), int((y1 - y0) / 2)).move_by_offset(
        int(x1 - x0) - int((x1 - x0) / 2), int(y1 - y0) - int((y1 - y0) / 2)
    )
    chain.release().perform()


def coords(driver, prefix: str) -> list[float]:
    return [float(e.get_attribute("value")) for e in driver.find_elements("css selector", f"input[id^='{prefix}-']")]


def _small(deviation: str) -> bool:
    """A deviation as the page prints it ("+0.03°"; "-" while a preview is on its way) within 0.05 degrees."""
    try:
        return abs(float(deviation.rstrip("°"))) <= 0.05
    except ValueError:
        return False


def preview_ready(driver) -> bool:
    return not by_css(driver, "#use-measured").get_attribute("disabled")


def test_draw_a_new_recipe_take_the_measured_lay_and_save(page, tmp_path):
    url, driver, folder, shots = page("lw-220-0001.png")
    driver.get(url + "/")
    by_css(driver, "#recipe-page-link").click()
    assert driver.title.startswith("Recipe on lw-220-0001.png")
    # a new recipe without regions: the loader's own message, and nothing to save
    wait(driver, lambda d: "needs a list of 1 to 1000 regions" in by_css(d, "#problems").text)
    assert by_css(driver, "#save").get_attribute("disabled")

    by_css(driver, "input[name=tool][value=rect]").click()
    drag(driver, (40, 60), (360, 540))
    x, y, w, h = coords(driver, "c")
    # whole pixels, within a screen pixel (the photo is shown at about 1.2 screen px per image px)
    assert (x, y, w, h) == pytest.approx((40, 60, 320, 480), abs=2) and all(v == int(v) for v in (x, y, w, h))

    by_css(driver, "#draw-exclusion").click()
    by_css(driver, "input[name=tool][value=circle]").click()
    drag(driver, (200, 300), (240, 300))
    cx, cy, r = coords(driver, "x-0")
    assert (cx, cy, r) == pytest.approx((200, 300, 40), abs=2)

    wait(driver, preview_ready)
    button = by_css(driver, "#use-measured")
    measured = button.text.removeprefix("use measured ").removesuffix("°")
    assert 85 < float(measured) < 95  # the demo panel's grain is vertical
    button.click()
    assert by_css(driver, "#r-lay-deg").get_attribute("value") == measured
    # the preview runs again against the new expected lay: the deviation is the rounding left over
    wait(driver, lambda d: _small(by_css(d, "#p-deviation").text) and preview_ready(d))
    page_lay = by_css(driver, "#p-lay").text
    driver.save_screenshot(str(shots / "1-drawn.png"))
    assert unnamed_controls(driver) == []

    file_name = by_css(driver, "#f-file")
    file_name.clear()
    file_name.send_keys("lw-220-drawn.yaml")
    wait(driver, lambda d: not by_css(d, "#save").get_attribute("disabled"))
    by_css(driver, "#save").click()
    wait(driver, lambda d: "Saved lw-220-drawn.yaml, revision 1" in by_css(d, "#save-msg").text)
    driver.save_screenshot(str(shots / "2-saved.png"))

    saved = folder / "lw-220-drawn.yaml"
    assert run_cli(["-q", "check", str(saved)]) == 0
    out = tmp_path / "out"
    image = ROOT / "demo_parts" / "lw-220-0001.png"
    assert run_cli(["-q", "inspect", str(saved), str(image), "--out", str(out), "--no-report"]) == 0
    (region,) = json.loads((out / "lw-220-0001.json").read_text())["regions"]
    assert format_angle(region["lay_deg"], axial=True) == page_lay  # what inspect prints, as the page showed it
    (drawn,) = load_recipe(saved).regions
    assert drawn.lay_deg == (float(measured),) and drawn.exclude[0].kind == "circle"


def test_edit_the_cover_plate_recipe_type_a_coordinate_and_a_wrong_value(page):
    url, driver, folder, shots = page("cp-14-0001.png", "cp-14-cover-plate.yaml")
    original = (folder / "cp-14-cover-plate.yaml").read_bytes()
    driver.get(url + "/recipe")
    assert tab_order(driver, 3)[:3] == ["Skip to the content", "surfinspect review: all batches", "All batches"]
    # (tab_order reloads the page: Save is open once the check of the loaded recipe is back)
    wait(
        driver,
        lambda d: "No problem" in by_css(d, "#problems").text and not by_css(d, "#save").get_attribute("disabled"),
    )
    assert by_css(driver, "#f-revision").text == "1 (saved as 2)"

    by_css(driver, "#save").click()  # the file exists: the page asks first
    wait(driver, lambda d: by_css(d, "#overwrite").is_displayed())
    assert "kept as cp-14-cover-plate.rev1.yaml" in by_css(driver, "#overwrite-msg").text
    assert (folder / "cp-14-cover-plate.yaml").read_bytes() == original
    by_css(driver, "#overwrite-yes").click()
    wait(driver, lambda d: "revision 2" in by_css(d, "#save-msg").text)
    before, after = load_recipe(folder / "cp-14-cover-plate.rev1.yaml"), load_recipe(folder / "cp-14-cover-plate.yaml")
    assert (folder / "cp-14-cover-plate.rev1.yaml").read_bytes() == original  # the old revision, readable as it was
    assert after.revision == 2 and before.revision == 1
    assert [_region_facts(g) for g in after.regions] == [_region_facts(g) for g in before.regions]

    # a typed coordinate moves the drawn region (its SVG rectangle, in frame units)
    x_field = by_css(driver, "#c-0")
    x_field.clear()
    x_field.send_keys("10")
    assert by_css(driver, "rect.region[data-region='0']").get_attribute("x") == "10"
    # a wrong value: the message `surfinspect check` prints for that file, and Save blocked
    tol = by_css(driver, "#r-tolerance_deg")
    tol.clear()
    tol.send_keys("-1")
    wait(driver, lambda d: "tolerance_deg: out of range (got -1, allowed > 0 and <= 45)" in by_css(d, "#problems").text)
    problem = by_css(driver, "#problems li.problem").text
    assert problem.startswith("cp-14-cover-plate.yaml:") and by_css(driver, "#save").get_attribute("disabled")
    driver.save_screenshot(str(shots / "3-wrong-value.png"))
    assert unnamed_controls(driver) == []

    # by keyboard alone: the circle tool by its key, a circle added where the view is, its numbers next
    from selenium.webdriver.common.keys import Keys

    by_css(driver, "body").send_keys("c")
    by_css(driver, "#add-shape").send_keys(Keys.ENTER)
    assert "region-3 · circle" in by_css(driver, "#region-list").text
    assert driver.switch_to.active_element.get_attribute("id") == "c-0"
    by_css(driver, "#undo").click()  # and back: the circle goes, redo brings it again
    assert "region-3" not in by_css(driver, "#region-list").text
    by_css(driver, "#redo").click()
    assert "region-3 · circle" in by_css(driver, "#region-list").text
    driver.execute_script("document.querySelector('.rp-panel details').open = true")
    wait(driver, lambda d: "  - name: region-3\n    circle: [" in by_css(d, "#file-text").get_attribute("textContent"))


def _region_facts(region):
    return (region.name, region.shape, region.exclude, region.lay, region.lay_deg, region.tolerance_deg,
            region.max_deviating_fraction, region.cell_px)  # fmt: skip
