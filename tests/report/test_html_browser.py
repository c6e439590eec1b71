"""The HTML report opened in real headless Chromium: it renders, its figures are there, names are text."""

import pytest
from selenium.webdriver.common.by import By

from critline import cautions
from critline.report import write_reports

pytestmark = pytest.mark.browser


def test_report_renders_with_its_figures(sample_result, browser, tmp_path):
    paths = write_reports(sample_result, tmp_path / "reports")
    browser.get(paths["html"].resolve().as_uri())
    body = browser.find_element(By.TAG_NAME, "body").text

    assert browser.title.startswith("critline report")
    # derived figures of the oval stone (stand-in reader: edges 1.5440/1.5442 and 1.5532)
    assert "1.5440" in body and "1.5532" in body and "0.0092" in body
    # ranked candidates with what agrees and what conflicts, and the separating test
    assert "quartz" in body and "amethyst" in body
    assert "RI 1.544-1.553 fits" in body and "birefringence too high" in body
    assert "specific gravity: 2.65 vs 2.3-4.5" in body
    # a candidate name with markup in it is text too
    assert "<b>glass</b>" in body
    # charts: one rotation plot per stone with readings, a profile near the edges
    rotation_plots = browser.find_elements(By.CSS_SELECTOR, "svg.rotation-plot")
    assert len(rotation_plots) == 2
    assert all(p.size["width"] > 300 and p.size["height"] > 150 for p in rotation_plots)
    marks = browser.find_elements(By.CSS_SELECTOR, "svg.rotation-plot circle, svg.rotation-plot rect")
    assert len(marks) >= 7
    assert browser.find_elements(By.CSS_SELECTOR, "svg.profile-plot polyline")
    # the stone without rotation information is plotted in photo order and says so
    assert "photo in taking order (rotation not known)" in browser.page_source
    assert "rotation not known for any photo" in body
    # thumbnails: embedded, decoded by the browser, small
    imgs = browser.find_elements(By.CSS_SELECTOR, "figure img")
    assert len(imgs) == 6
    for img in imgs:
        assert img.get_attribute("src").startswith("data:image/jpeg;base64,")
        assert browser.execute_script("return arguments[0].complete && arguments[0].naturalWidth", img) > 0
    # hostile file names are shown as text; nothing was executed or injected
    assert "<script>.jpg" in body
    assert "<img src=x onerror=window.__pwned=1>.png" in body
    assert browser.execute_script("return window.__pwned === undefined")
    assert browser.execute_script("return document.getElementsByTagName('script').length") == 0
    assert browser.execute_script("return document.querySelectorAll('img:not([src^=\"data:\"])').length") == 0
    # problem files, one line each; cautions with the evidence note
    problems = [li.text for li in browser.find_elements(By.CSS_SELECTOR, ".problems li")]
    assert any(t.startswith("oval/<script>.jpg: ") for t in problems)
    assert any(t.startswith("empty/: ") for t in problems)
    assert "A reading is evidence, not a verdict" in body
    for text in cautions.ALL:
        assert text in body
