import os
import shutil
import sys
from pathlib import Path

import pytest

# the batch tests' stand-in reader and core are shared with the report tests
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "batch"))

CHROMIUM = "/usr/bin/chromium"
CHROMEDRIVER = "/usr/bin/chromedriver"


@pytest.fixture
def fake_core(monkeypatch):
    import batchfakes

    from critline.batch import stones

    monkeypatch.setattr(stones, "_core", batchfakes.fake_core)
    return batchfakes


@pytest.fixture
def sample_result(tmp_path, fake_core):
    """A small batch with two stones, a hostile file name and problem files (stand-in reader)."""
    from critline.batch import run_batch

    w = fake_core.write_fake_photo
    parcel = tmp_path / "parcel"
    w(parcel / "oval" / "r000_pol0.png", [1.5442, (1.7900, "liquid")])
    w(parcel / "oval" / "r000_pol90.png", [1.5532])
    w(parcel / "oval" / "r090_none.png", [1.5442, 1.5532])
    w(parcel / "oval" / "<img src=x onerror=window.__pwned=1>.png", [1.5440])
    w(parcel / "no-turns" / "IMG_0001.png", [1.7180])
    w(parcel / "no-turns" / "IMG_0002.png", [1.7182])
    (parcel / "oval" / "<script>.jpg").write_bytes(b"<script>window.__pwned=2</script>")
    (parcel / "empty").mkdir()
    return run_batch(parcel, out_dir=tmp_path / "out", workers=1, reader=fake_core.fake_reader)


@pytest.fixture
def browser(tmp_path):
    """Headless Chromium through selenium; skipped when absent outside CI, required in CI."""
    missing = [p for p in (CHROMIUM, CHROMEDRIVER) if not (os.path.exists(p) or shutil.which(Path(p).name))]
    if missing:
        if os.environ.get("CI"):
            pytest.fail(f"CI is set but {', '.join(missing)} is missing (install chromium chromium-driver)")
        pytest.skip(f"headless Chromium not installed ({', '.join(missing)} missing)")
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    opts = webdriver.ChromeOptions()
    opts.binary_location = CHROMIUM if os.path.exists(CHROMIUM) else shutil.which("chromium")
    for arg in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
                "--disable-component-update", "--disable-sync", "--no-first-run",
                "--disable-dev-shm-usage", f"--user-data-dir={tmp_path / 'chromium-profile'}",
                "--window-size=1200,900"):
        opts.add_argument(arg)
    driver_path = CHROMEDRIVER if os.path.exists(CHROMEDRIVER) else shutil.which("chromedriver")
    driver = webdriver.Chrome(service=Service(driver_path), options=opts)
    try:
        yield driver
    finally:
        driver.quit()
