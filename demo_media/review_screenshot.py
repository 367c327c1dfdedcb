"""Take demo_media/review.png: the review page of the demo video in headless Chromium.

Captions a copy of demo.mp4 (with the events JSON) in a temporary folder, serves its review
page as `captioner review --serve` does, selects the phone cue and saves a screenshot beside
this script.

    python demo_media/review_screenshot.py
"""

from __future__ import annotations

import shutil
import sys
import tempfile
import threading
import time
from pathlib import Path

from selenium import webdriver
from selenium.webdriver.chrome.service import Service

from captioner.cli import main as captioner
from captioner.review import waveform
from captioner.review_server import start_server

HERE = Path(__file__).parent


def main() -> int:
    with tempfile.TemporaryDirectory() as folder:
        media = Path(folder) / "demo.mp4"
        shutil.copy(HERE / "demo.mp4", media)
        if captioner(["caption", str(media), "--events-json"]):
            return 1
        server = start_server(media, captions=None, sidecar=None, waveform=waveform(media))
        threading.Thread(target=server.serve_forever, daemon=True).start()
        options = webdriver.ChromeOptions()
        options.binary_location = shutil.which("chromium") or "chromium"
        for flag in (
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--window-size=1400,1050",
            "--hide-scrollbars",
        ):
            options.add_argument(flag)
        driver = webdriver.Chrome(
            options=options, service=Service(shutil.which("chromedriver") or "chromedriver")
        )
        try:
            driver.get(server.url)
            time.sleep(1.0)
            driver.find_elements("css selector", ".cue-block")[3].click()  # [phone ringing]
            driver.execute_script("document.querySelector('video').currentTime = 22.4")
            time.sleep(1.0)
            driver.save_screenshot(str(HERE / "review.png"))
        finally:
            driver.quit()
            server.shutdown()
            server.server_close()
    return 0


if __name__ == "__main__":
    sys.exit(main())
