"""The review station in a real browser: headless Chromium (Debian's package) driven by Selenium.

The inspector's round: open the batches, open the demo batch, find a rejected
part, open it, zoom, hover a patch, record a disposition, sign the batch off;
then ``surfinspect verify`` passes and the disposition is read back from the
archive. Screenshots of each page go to ``<tmp>/screenshots``.
"""

from __future__ import annotations

import pytest
from browser_helpers import all_css, by_css, chromium, running_server, tab_order, unnamed_controls
from review_helpers import PASSPHRASE, run_cli

from surfinspect.archive import store
from surfinspect.review.app import ReviewConfig
from surfinspect.review.pages import VERDICT_LOOKS

pytestmark = pytest.mark.browser


@pytest.fixture
def station(demo_archive, tmp_path):
    demo = demo_archive.copy(tmp_path)
    with running_server(ReviewConfig(demo.root, key_dir=demo.keys)) as url:
        with chromium(tmp_path / "profile") as driver:
            shots = tmp_path / "screenshots"
            shots.mkdir()
            yield demo, url, driver, shots


def wait_for_pictures(driver) -> None:
    """Wait (at most 20 s) until every picture on the page has loaded, so the screenshot shows them."""
    from selenium.webdriver.support.ui import WebDriverWait

    WebDriverWait(driver, 20).until(
        lambda d: d.execute_script("return Array.from(document.images).every(i => i.complete && i.naturalWidth > 0)")
    )


def fill_act(driver, choice: str, value: str, prefix: str, comment: str, passphrase: str) -> None:
    """Fill a disposition or sign-off form as a person would (the folder key, typed passphrase) and send it."""
    from selenium.webdriver.support.ui import Select

    by_css(driver, f'input[name="{choice}"][value="{value}"]').click()
    if comment:
        by_css(driver, f"#{prefix}comment").send_keys(comment)
    Select(by_css(driver, f"#{prefix}key")).select_by_index(1)
    by_css(driver, f"#{prefix}passphrase").send_keys(passphrase)
    by_css(driver, f"#{prefix}passphrase").submit()


def test_the_inspectors_round(station):
    from selenium.webdriver.common.action_chains import ActionChains

    demo, url, driver, shots = station
    driver.get(url + "/")
    driver.save_screenshot(str(shots / "1-batches.png"))
    assert unnamed_controls(driver) == []
    order = tab_order(driver, 4)
    assert order == [
        "Skip to the content",
        "surfinspect review: all batches",
        "Write a recipe by drawing on a reference photo",
        "Batch id or recipe",
    ]
    by_css(driver, f'a[href="/batch/{demo.batch_id}"]').click()

    assert driver.title.startswith(f"Batch {demo.batch_id}")
    wait_for_pictures(driver)
    driver.save_screenshot(str(shots / "2-batch.png"))
    driver.execute_script("document.getElementById('stats-h').scrollIntoView()")
    driver.save_screenshot(str(shots / "2b-batch-statistics.png"))
    assert unnamed_controls(driver) == []
    reject_word = VERDICT_LOOKS["reject"]["word"]
    by_css(driver, f'a[aria-label^="only {reject_word.lower()}"]').click()
    cards = all_css(driver, "li.card")
    assert len(cards) == 2 and all("card-reject" in c.get_attribute("class") for c in cards)
    cards[-1].find_element("css selector", "a").click()  # lw-220-0004: one small patch

    assert reject_word in by_css(driver, "h1").text
    viewer = by_css(driver, "#viewer")
    fitted = float(viewer.get_attribute("data-scale"))
    by_css(driver, 'button[data-zoom="in"]').click()
    assert float(viewer.get_attribute("data-scale")) == pytest.approx(fitted * 1.5, rel=0.01)
    patch = by_css(driver, "button.patch")
    mark = by_css(driver, "#patch-mark-1")
    assert "hot" not in (mark.get_attribute("class") or "")
    ActionChains(driver).move_to_element(patch).perform()
    assert "hot" in mark.get_attribute("class")
    patch.click()  # zooms to the patch
    assert float(viewer.get_attribute("data-scale")) > 2 * fitted
    wait_for_pictures(driver)
    driver.save_screenshot(str(shots / "3-part-zoomed.png"))
    assert unnamed_controls(driver) == []

    fill_act(driver, "decision", "rework", "disp-", "grain 8 deg off over the whole face; rebrush", PASSPHRASE)
    assert "Recorded: disposition #1, rework by R. OSTERMANN" in by_css(driver, ".notice").text
    driver.save_screenshot(str(shots / "4-part-disposed.png"))

    driver.get(f"{url}/batch/{demo.batch_id}")
    fill_act(driver, "meaning", "withheld", "sign-", "two rejects: rework ordered", PASSPHRASE)
    assert "Recorded: sign-off #1, withheld by R. OSTERMANN" in by_css(driver, ".notice").text
    driver.save_screenshot(str(shots / "5-batch-signed.png"))
    driver.get(url + "/")
    assert "withheld" in by_css(driver, "table.list tbody").text
    driver.save_screenshot(str(shots / "6-batches-signed.png"))

    assert run_cli(["-q", "verify", "--archive", str(demo.root)]) == 0
    with store.Archive(demo.root) as arc:
        (d,) = arc.dispositions(demo.batch_id)
        (s,) = arc.signoffs(demo.batch_id)
    assert (d.decision, d.signer_name, d.comment) == (
        "rework",
        "R. OSTERMANN",
        "grain 8 deg off over the whole face; rebrush",
    )
    assert s.meaning == "withheld"


def test_keys_move_between_parts_and_zoom(station):
    from selenium.webdriver.common.keys import Keys

    demo, url, driver, _ = station
    driver.get(f"{url}/batch/{demo.batch_id}/part/2")
    body = by_css(driver, "body")
    body.send_keys("n")
    assert driver.current_url.endswith("/part/3")
    by_css(driver, "body").send_keys("p")
    assert driver.current_url.endswith("/part/2")
    viewer = by_css(driver, "#viewer")
    before = float(viewer.get_attribute("data-scale"))
    by_css(driver, "body").send_keys("+")
    assert float(viewer.get_attribute("data-scale")) > before
    by_css(driver, "body").send_keys("0")
    assert float(viewer.get_attribute("data-scale")) == pytest.approx(before, rel=0.01)
    # Enter on a focused patch zooms to it
    patch = by_css(driver, "button.patch")
    patch.send_keys(Keys.ENTER)
    assert float(viewer.get_attribute("data-scale")) != pytest.approx(before, rel=0.01)


def test_wheel_zooms_at_the_pointer_and_drag_pans(station):
    from selenium.webdriver.common.action_chains import ActionChains
    from selenium.webdriver.common.actions.wheel_input import ScrollOrigin

    demo, url, driver, _ = station
    driver.get(f"{url}/batch/{demo.batch_id}/part/3")
    viewer = by_css(driver, "#viewer")
    fitted = float(viewer.get_attribute("data-scale"))
    ActionChains(driver).scroll_from_origin(ScrollOrigin.from_element(viewer), 0, -120).perform()
    assert float(viewer.get_attribute("data-scale")) == pytest.approx(fitted * 1.25, rel=0.01)
    stage = by_css(driver, "#stage")
    before = stage.value_of_css_property("transform")
    ActionChains(driver).click_and_hold(viewer).move_by_offset(-80, -60).release().perform()
    assert stage.value_of_css_property("transform") != before
    # the part page's controls in Tab order: the zoom buttons come before the picture, the patches after
    names = tab_order(driver, 12)
    assert names.index("zoom in (key +)") < names.index("fit the picture (key 0)")
    assert any(n.startswith("photo of lw-220-0004.png") for n in names)


def test_wrong_passphrase_records_nothing_and_a_forged_post_is_refused(station):
    demo, url, driver, shots = station
    with store.Archive(demo.root) as arc:
        before = arc.chain_head()
    driver.get(f"{url}/batch/{demo.batch_id}")
    fill_act(driver, "meaning", "released", "sign-", "", "not the passphrase")
    assert "passphrase is wrong" in by_css(driver, "p.error[role=alert]").text
    assert by_css(driver, "#sign-passphrase").get_attribute("value") == ""  # never sent back
    driver.save_screenshot(str(shots / "7-wrong-passphrase.png"))
    status = driver.execute_async_script(
        """
        const done = arguments[arguments.length - 1];
        const form = new FormData();
        form.append("meaning", "released");
        form.append("passphrase", arguments[0]);
        fetch(arguments[1], {method: "POST", body: form}).then(r => done(r.status));
        """,
        PASSPHRASE,
        f"{url}/batch/{demo.batch_id}/signoff",
    )
    assert status == 403
    with store.Archive(demo.root) as arc:
        assert arc.chain_head() == before and arc.signoffs(demo.batch_id) == []
