"""The web page at `/`, used the way a person would: in a real (headless) Chromium, through
its own form controls, against a real `mixgauge serve`.

Each test compares what the page shows with what the API answers for the same upload or
sweep, so no expected value is written here: the recommended candidate, the progress counts,
the dataset's size and the server's error text all come from the server at run time.

Screenshots (``<name>.png``, the window; ``<name>-full.png``, the whole page) and the browser
console (``<name>-console.log``) are written to ``target/artifacts/`` whatever the outcome,
so they are there when a test fails: ``page`` (the sweep, at the end), ``page-narrow`` (the
same page in a one-column window) and ``bad-upload``.
"""

from __future__ import annotations

import re

import pytest
from selenium.common.exceptions import NoSuchElementException, TimeoutException
from selenium.webdriver.common.by import By
from selenium.webdriver.support import expected_conditions as EC
from selenium.webdriver.support.ui import WebDriverWait

from page_helpers import WINDOW, Console, save_screenshots

#: Seconds a sweep started from the page may take to finish and show its report. The
#: settings below take a few seconds on two cores; the rest is headroom for a loaded machine.
SWEEP_TIMEOUT = 120
#: Seconds a single page reaction (an upload's answer, a list refresh) may take.
STEP_TIMEOUT = 30

FINAL = {"succeeded", "failed", "cancelled"}

#: A window width below the page's two-column breakpoint.
NARROW = 860
#: Pixels of blank frame below the end of the report that still count as a fitted frame.
BLANK_BELOW_REPORT = 80

#: What the person types into the settings form: small, so the sweep is quick.
COMPONENTS_TYPED = "1..8"
COMPONENTS_MEANT = list(range(1, 9))
FOLDS = 3
RESTARTS = 2
SEED = 7  # not the form's default, so the test sees the typed value reach the server

#: The report's recommendation cards, by their title, and the API field each one shows.
CARDS = {
    "Recommended: highest held-out": "heldout_max",
    "Fewest parameters within one SE": "heldout_one_se",
    "Lowest BIC": "bic_min",
    "Lowest AIC": "aic_min",
    "Lowest ICL": "icl_min",
}
CHOICE = re.compile(r"^(full|diagonal), K = (\d+)$")


def wait(driver, timeout=STEP_TIMEOUT):
    return WebDriverWait(driver, timeout, poll_frequency=0.2)


def type_into(driver, element_id: str, text: str) -> None:
    box = driver.find_element(By.ID, element_id)
    box.clear()
    box.send_keys(text)
    assert box.get_attribute("value") == text, f"#{element_id} did not take {text!r}"


def tick(driver, element_id: str) -> None:
    box = driver.find_element(By.ID, element_id)
    if not box.is_selected():
        box.click()
    assert box.is_selected(), f"#{element_id} cannot be ticked"


def shown_message(driver) -> tuple[str, str]:
    """Waits for #message to appear; its (class, text)."""
    box = wait(driver).until(
        EC.visibility_of_element_located((By.ID, "message")),
        "no message appeared in #message after the upload",
    )
    return box.get_attribute("class"), box.text


def upload_through_form(driver, path) -> tuple[str, str]:
    wait(driver).until(EC.element_to_be_clickable((By.ID, "upload-button")))
    driver.find_element(By.ID, "file-input").send_keys(str(path))
    driver.find_element(By.ID, "upload-button").click()
    return shown_message(driver)


def parsed_choice(text: str):
    m = CHOICE.match(text.strip())
    return (m.group(1), int(m.group(2))) if m else text.strip()


def api_choice(c):
    return (c["covariance"], c["components"]) if c else "no eligible candidate"


def test_a_sweep_started_from_the_page_shows_the_report_the_api_describes(server, browser, demo_csv):
    console = Console(browser, "page")
    try:
        run_sweep_from_the_page(server, browser, console, demo_csv)
    finally:
        save_screenshots(browser, "page")
        console.read()


def run_sweep_from_the_page(server, driver, console, demo_csv):
    driver.get(server.url("/"))
    assert driver.title == "mixgauge"

    # ---- 1. upload through the form -------------------------------------------------------
    kind, text = upload_through_form(driver, demo_csv)
    assert "ok" in kind.split(), f"the upload was not accepted: #message says {text!r}"
    listed = server.get_json("/v1/datasets")["items"]
    assert len(listed) == 1, f"the server holds {len(listed)} datasets after one upload"
    dataset = listed[0]
    assert f"{dataset['rows']} rows × {dataset['columns']} columns" in text, text
    assert demo_csv.name in text, text
    select = driver.find_element(By.ID, "dataset-select")
    assert select.get_attribute("value") == dataset["id"], "the new dataset is not selected"
    info = driver.find_element(By.ID, "dataset-info").text
    for name in dataset["column_names"]:
        assert name in info, f"column {name!r} is not named in #dataset-info: {info!r}"

    # ---- 2. settings and start ------------------------------------------------------------
    type_into(driver, "components-input", COMPONENTS_TYPED)
    type_into(driver, "folds-input", str(FOLDS))
    type_into(driver, "restarts-input", str(RESTARTS))
    type_into(driver, "seed-input", str(SEED))
    tick(driver, "cov-full")
    tick(driver, "cov-diagonal")
    driver.find_element(By.ID, "start-button").click()

    wait(driver).until(
        lambda d: re.search(r"#sw-\d+$", d.current_url),
        "the page did not open the new sweep (no #sw-<n> in its address)",
    )
    sweep_id = driver.current_url.rsplit("#", 1)[1]
    assert driver.find_element(By.ID, "job-panel").is_displayed()

    # ---- 3. follow it until it ends -------------------------------------------------------
    def final_state(d):
        t = d.find_element(By.ID, "state").text.strip()
        return t if t in FINAL else False

    state = wait(driver, SWEEP_TIMEOUT).until(
        final_state, f"#state did not reach a final state within {SWEEP_TIMEOUT} s"
    )
    job = server.get_json(f"/v1/sweeps/{sweep_id}")
    if state != "succeeded":
        error = driver.find_element(By.ID, "job-error").text
        pytest.fail(f"the sweep ended {state}: page says {error!r}; API says {job.get('error')!r}")
    assert job["state"] == "succeeded"

    # The form's fields reached the server as the settings they stand for.
    s = job["settings"]
    assert s["components"] == COMPONENTS_MEANT
    assert s["covariances"] == ["full", "diagonal"]
    assert (s["folds"], s["restarts"], s["seed"]) == (FOLDS, RESTARTS, SEED)
    assert job["dataset"] == dataset["id"]

    done, total = job["progress"]["done"], job["progress"]["total"]
    assert done == total > 0, job["progress"]
    bar = driver.find_element(By.ID, "progress")
    assert (float(bar.get_attribute("value")), float(bar.get_attribute("max"))) == (total, total)
    assert driver.find_element(By.ID, "progress-text").text == f"{done} of {total} fits done"
    assert not driver.find_element(By.ID, "cancel-button").is_displayed(), "Cancel shown on a finished sweep"

    # ---- 4. the list of sweeps ------------------------------------------------------------
    item = wait(driver).until(
        EC.presence_of_element_located((By.CSS_SELECTOR, f'#job-list li[data-id="{sweep_id}"]')),
        f"{sweep_id} is not in #job-list",
    )
    assert item.find_element(By.CSS_SELECTOR, ".job-id").text == sweep_id
    wait(driver).until(
        lambda d: item.find_element(By.CSS_SELECTOR, ".badge").text == "succeeded",
        f"{sweep_id} is not marked succeeded in #job-list",
    )
    assert "open" in item.get_attribute("class").split(), "the open sweep is not marked in #job-list"
    assert not driver.find_element(By.ID, "job-list-empty").is_displayed()

    # ---- 5. the report in its frame -------------------------------------------------------
    wait(driver).until(
        EC.visibility_of_element_located((By.ID, "report-panel")),
        "the report panel did not appear after the sweep succeeded",
    )
    frame = driver.find_element(By.ID, "report-frame")
    recommendations = job["result"]["recommendations"]
    driver.switch_to.frame(frame)
    try:
        wait(driver).until(
            EC.presence_of_element_located((By.CSS_SELECTOR, "svg.chart")),
            "no chart (svg.chart) in the report frame",
        )
        check_report(driver, recommendations)
    finally:
        driver.switch_to.default_content()
    wait_for_fit(driver, "once shown")

    assert_no_sideways_scroll(driver)

    # A narrower window (one column) makes the report longer, a wider one shorter again: the
    # frame follows, so the report neither scrolls inside it nor trails blank space.
    for width in (NARROW, WINDOW[0]):
        driver.set_window_size(width, WINDOW[1])
        wait_for_fit(driver, f"at a window width of {width} px")
        if width == NARROW:
            save_screenshots(driver, "page-narrow")
        assert_no_sideways_scroll(driver)
    # Opening a folded cell of the report lengthens it too.
    driver.switch_to.frame(frame)
    try:
        folded = driver.find_elements(By.CSS_SELECTOR, "#candidates details")
        assert folded, "the report has no folded cells (the per-fold detail)"
        for cell in folded[:3]:
            summary = cell.find_element(By.CSS_SELECTOR, "summary")
            driver.execute_script("arguments[0].scrollIntoView({block: 'center'})", summary)
            summary.click()
            assert cell.get_attribute("open") is not None, "a folded cell did not open"
    finally:
        driver.switch_to.default_content()
    wait_for_fit(driver, "after opening folded cells")

    message = driver.find_element(By.ID, "message")
    assert not message.is_displayed() or "error" not in message.get_attribute("class").split(), message.text

    # ---- 6. nothing went wrong in the console ---------------------------------------------
    errors = console.errors()
    assert errors == [], "the browser console has errors:\n" + "\n".join(e["message"] for e in errors)


def assert_no_sideways_scroll(driver):
    widths = driver.execute_script(
        "const e = document.documentElement; return [e.scrollWidth, e.clientWidth];"
    )
    assert widths[0] <= widths[1], f"the page is wider ({widths[0]} px) than the window ({widths[1]} px)"


def frame_sizes(driver) -> dict:
    """The report's height and its frame's inner height, in CSS pixels."""
    driver.switch_to.frame(driver.find_element(By.ID, "report-frame"))
    try:
        content, scroll, view = driver.execute_script(
            """const e = document.documentElement;
               return [e.getBoundingClientRect().height, e.scrollHeight, window.innerHeight];"""
        )
    finally:
        driver.switch_to.default_content()
    return {"content": content, "scroll": scroll, "frame": view}


def frame_fits(driver) -> bool:
    s = frame_sizes(driver)
    return s["scroll"] <= s["frame"] and s["frame"] - s["content"] <= BLANK_BELOW_REPORT


def wait_for_fit(driver, when: str) -> None:
    try:
        wait(driver).until(frame_fits)
    except TimeoutException:
        pytest.fail(f"{when}, the report frame does not fit its content: {frame_sizes(driver)}")


def check_report(driver, recommendations):
    """Inside the report frame: charts drawn at a readable size, the stylesheet in force, and
    every recommendation card naming the candidate the API recommends."""
    for section in ("likelihood", "criteria"):
        try:
            chart = driver.find_element(By.CSS_SELECTOR, f"section#{section} svg.chart")
        except NoSuchElementException:
            pytest.fail(f"the report has no {section} chart")
        box = chart.rect
        assert box["width"] >= 600 and box["height"] >= 200, f"the {section} chart is drawn at {box}"
        assert chart.find_elements(By.CSS_SELECTOR, "text"), f"the {section} chart has no labels"

    # The report's inline <style> was moved to a blob: stylesheet; it must have loaded (the
    # page's policy refuses inline styles, so without it the report is unstyled).
    sheets = driver.execute_script(
        """return [...document.styleSheets].map((s) => {
             let rules = -1;
             try { rules = s.cssRules.length; } catch (_) {}
             return [s.href || "", rules];
           });"""
    )
    assert any(href.startswith("blob:") and rules > 0 for href, rules in sheets), sheets
    assert not driver.find_elements(By.CSS_SELECTOR, "style"), "an inline <style> was left in the report"
    display = driver.execute_script(
        "return getComputedStyle(document.querySelector('svg.chart')).display;"
    )
    assert display == "block", f"the report's stylesheet is not in force (svg.chart is {display})"

    cards = {}
    for card in driver.find_elements(By.CSS_SELECTOR, "#summary .pick"):
        title = card.find_element(By.CSS_SELECTOR, ".what").text.strip()
        cards[title] = card
    for title, field in CARDS.items():
        assert title in cards, f"no {title!r} card in the report (cards: {list(cards)})"
        shown = parsed_choice(cards[title].find_element(By.CSS_SELECTOR, ".which").text)
        assert shown == api_choice(recommendations[field]), (
            f"{title!r} shows {shown!r}; the API recommends {recommendations[field]!r}"
        )
    main = driver.find_element(By.CSS_SELECTOR, "#summary .pick.main")
    assert main.is_displayed()
    assert main.find_element(By.CSS_SELECTOR, ".what").text.strip() == "Recommended: highest held-out"

    best = recommendations["heldout_max"]
    assert best is not None, "the API recommends no candidate for this data"
    row = driver.find_element(By.CSS_SELECTOR, "#candidates tr.recommended")
    assert row.find_element(By.CSS_SELECTOR, "td").text == best["covariance"]
    assert row.find_element(By.CSS_SELECTOR, "th").text == str(best["components"])



def test_a_bad_file_uploaded_through_the_form_shows_the_servers_reason(server, browser, tmp_path):
    # A table with one text value where numbers are expected; where it is is chosen here, and
    # the message must say so.
    columns = ["width", "height", "depth"]
    bad_row, bad_column, bad_value = 3, "height", "tall"
    lines = [",".join(columns)]
    for r in range(1, 7):
        values = [f"{r * 1.5 + c:.2f}" for c in range(len(columns))]
        if r == bad_row:
            values[columns.index(bad_column)] = bad_value
        lines.append(",".join(values))
    path = tmp_path / "boxes.csv"
    path.write_text("\n".join(lines) + "\n")

    console = Console(browser, "bad-upload")
    try:
        browser.get(server.url("/"))
        kind, text = upload_through_form(browser, path)
    finally:
        save_screenshots(browser, "bad-upload")
        console.read()

    r = server.http.post(
        server.url("/v1/datasets"), data=path.read_bytes(), headers={"Content-Type": "text/csv"}, timeout=30
    )
    assert r.status_code == 422, f"the server took the bad file: {r.status_code} {r.text}"
    reason = r.json()["error"]["message"]
    assert "error" in kind.split(), f"#message is not shown as an error ({kind!r}): {text!r}"
    assert text == reason, f"#message says {text!r}; the server says {reason!r}"
    assert f"row {bad_row}" in text and f'"{bad_column}"' in text and bad_value in text, text

    assert server.get_json("/v1/datasets")["items"] == [], "the bad file was stored"
    assert browser.find_element(By.ID, "dataset-select").get_attribute("value") == ""
    button = browser.find_element(By.ID, "upload-button")
    assert button.is_enabled() and button.text == "Upload", "the upload button did not recover"

    # The refused upload is the one expected console entry (Chromium logs every failed load).
    errors = [
        e for e in console.errors()
        if not ("/v1/datasets" in e["message"] and "422" in e["message"])
    ]
    assert errors == [], "the browser console has errors:\n" + "\n".join(e["message"] for e in errors)
