"""The review page: its data and safety in Python, then the page itself in headless Chromium.

Saved tracks are checked with the reference parsers webvtt-py and srt. Browser tests need
Debian's chromium and chromium-driver (installed by .ci/run); elsewhere they are skipped,
but never in CI.
"""

from __future__ import annotations

import base64
import hashlib
import io
import json
import os
import re
import shutil
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest
import srt
import webvtt

from captioner import review, update
from captioner.cli import main
from captioner.cues import Cue
from captioner.formats.subtitles import parse_subtitles
from conftest import tone, write_wav

HOSTILE = "<script>alert(1)</script> & -->"
HOSTILE_VTT = "&lt;script&gt;alert(1)&lt;/script&gt; &amp; --&gt;"  # as a WebVTT file must hold it
TRAP = '<img src=x onerror="window.pwned=1">'
MEDIA_NAME = "beeps & <i>.wav"  # file names are data too


MACHINE = (
    Cue(1000, 2000, ("[door slams]",), ("e0001",)),
    Cue(2500, 3500, (HOSTILE,), ("e0002",)),
    Cue(4000, 5200, ("[dog barking]",), ("e0003",)),
)


def _machine_track() -> str:
    return update.recorded_vtt(MACHINE, "drafted for a test")


def _sidecar() -> dict[str, Any]:
    event = {
        "concept": "dog",
        "class": "Dog",
        "kind": "transient",
        "priority": 3,
        "peak_score": 0.7,
        "mean_score": 0.5,
        "level_db": -20.0,
        "background_db": -40.0,
    }
    return {
        "version": 1,
        "source": MEDIA_NAME,
        "style": "brackets",
        "duration_ms": 6000,
        "dialogue": {"source": "classifier", "spans": [[0, 900], [5300, 6000]]},
        "events": [
            {
                **event,
                "id": "e0003",
                "text": "dog barking",
                "start_ms": 4000,
                "end_ms": 5200,
                "kept": True,
                "rule": "kept",
                "reason": "salience 0.9",
            },
            {
                **event,
                "id": "e0004",
                "concept": "glass",
                "text": TRAP,
                "start_ms": 5400,
                "end_ms": 5900,
                "kept": False,
                "rule": "dialogue",
                "reason": f"under dialogue {TRAP}",
            },
        ],
        "scores": {
            "hop_ms": 480,
            "patch_ms": 960,
            "concepts": {"dog": [0.1] * 8 + [0.8] * 3 + [0.1], "glass": [0.2] * 12, "rain": [0.9] * 12},
        },
    }


@pytest.fixture
def review_files(tmp_path: Path) -> dict[str, Path]:
    media = write_wav(tmp_path / MEDIA_NAME, tone(6.0, 880.0, 0.2))
    captions = tmp_path / "beeps.vtt"
    captions.write_text(_machine_track())
    events = tmp_path / "beeps.json"
    events.write_text(json.dumps(_sidecar()))
    page = tmp_path / "pages" / "review.html"
    page.parent.mkdir()
    assert (
        main(
            ["review", str(media), "--captions", str(captions), "--events-json", str(events), "-o", str(page)]
        )
        == 0
    )
    return {"media": media, "captions": captions, "events": events, "page": page}


# ---- Python side ---------------------------------------------------------------------


def test_json_for_script_cannot_close_the_script_element() -> None:
    text = review.json_for_script({"t": "</script><!-- & \u2028"})
    assert "<" not in text and ">" not in text and "&" not in text
    assert json.loads(text) == {"t": "</script><!-- & \u2028"}


def test_page_data_holds_cues_dropped_candidates_and_curves(review_files: dict[str, Path]) -> None:
    inputs = review.load_inputs(review_files["media"], review_files["captions"], review_files["events"])
    data = review.page_data(inputs, review_files["page"])
    assert [c["text"] for c in data["cues"]] == [
        "[door slams]",
        HOSTILE,
        "[dog barking]",
    ]  # entities decoded once
    assert data["media"] == {"src": "../beeps%20%26%20%3Ci%3E.wav", "name": MEDIA_NAME, "kind": "audio"}
    assert [d["id"] for d in data["dropped"]] == ["e0004"] and data["dropped"][0]["text"] == f"[{TRAP}]"
    assert set(data["curves"]["concepts"]) == {"dog", "glass"}  # only concepts that produced events
    assert any(n.startswith(update.RECORD_HEADING) for n in data["captions"]["notes"])


def _capitals_run(tmp_path: Path) -> tuple[dict[str, Any], Any]:
    """A real sidecar of a `capitals` run in which "dog barking" was dropped."""
    import numpy as np

    from captioner.captioned import Captioned
    from captioner.events import SoundEvent
    from captioner.formats.sidecar import sidecar
    from captioner.policy import Decision
    from captioner.scores import ScoreTrack
    from captioner.style import load_style
    from captioner.vocabulary import ClassEntry, Kind, Vocabulary

    vocabulary = Vocabulary(
        (
            ClassEntry(0, "Dog", "dog", "dog barking", "dog barks", Kind.TRANSIENT, 3, None),
            ClassEntry(1, "Speech", "speech", "speech", "speech", Kind.SPEECH, 1, None),
            ClassEntry(2, "Silence", "silence", "silence", "silence", Kind.IGNORE, 1, None),
        )
    )
    scores = np.array([[0.9, 0.8, 0.7], [0.1, 0.8, 0.7]], dtype=np.float32)
    track = ScoreTrack(scores, 480, 960, np.zeros(100), 10.0, 1440)
    dog = SoundEvent(
        "e0001",
        "dog",
        "Dog",
        "dog barking",
        "dog barks",
        Kind.TRANSIENT,
        3,
        None,
        0,
        960,
        0.9,
        0.5,
        -20.0,
        -40.0,
    )
    run = Captioned(
        tmp_path / "clip.wav",
        load_style("capitals"),
        "test",
        track,
        (),
        "classifier",
        (dog,),
        (Decision("e0001", False, "dialogue", "under speech"),),
        (),
    )
    return sidecar(run, vocabulary), track


def test_a_dropped_candidate_is_offered_as_the_runs_style_worded_it(tmp_path: Path) -> None:
    document, _ = _capitals_run(tmp_path)
    media = write_wav(tmp_path / "clip.wav", tone(1.5))
    captions = tmp_path / "clip.sounds.vtt"
    captions.write_text("WEBVTT\n")
    inputs = review.ReviewInputs(
        media, parse_subtitles("WEBVTT\n", "vtt"), captions, json.loads(json.dumps(document))
    )
    # BBC Subtitle Guidelines §17.2-17.4 (the capitals style): capitals, no brackets, present tense
    assert [d["text"] for d in review.page_data(inputs, tmp_path / "page.html")["dropped"]] == ["DOG BARKS"]
    assert document["events"][0]["text"] == "dog barking"  # the phrase stays, for older readers


def test_sidecar_curves_cover_the_concepts_that_can_become_captions(tmp_path: Path) -> None:
    document, track = _capitals_run(tmp_path)
    curves = document["scores"]
    assert curves["concepts"] == {
        "dog": [0.9, 0.1]
    }  # speech is told by the dialogue spans; ignored classes never caption
    assert (curves["hop_ms"], curves["patch_ms"]) == (track.hop_ms, track.patch_ms)


def test_sidecar_curves_keep_small_scores_apart_on_one_line_each(tmp_path: Path) -> None:
    import numpy as np

    from captioner.captioned import Captioned
    from captioner.formats.sidecar import dumps, sidecar
    from captioner.scores import ScoreTrack
    from captioner.style import load_style
    from captioner.vocabulary import ClassEntry, Kind, Vocabulary

    vocabulary = Vocabulary(
        (
            ClassEntry(0, "Dog", "dog", "dog barking", "dog barks", Kind.TRANSIENT, 3, None),
            ClassEntry(1, "Cat", "cat", "cat meowing", "cat meows", Kind.TRANSIENT, 3, None),
        )
    )
    scores = np.array([[0.91234, 0.0004], [0.000123, 0.0002], [0.000456, 0.0001]], dtype=np.float32)
    run = Captioned(
        tmp_path / "clip.wav",
        load_style("brackets"),
        "test",
        ScoreTrack(scores, 480, 960, np.zeros(200), 10.0, 1920),
        (),
        "classifier",
        (),
        (),
        (),
    )
    text = dumps(sidecar(run, vocabulary))
    curves = json.loads(text)["scores"]["concepts"]
    # Two significant digits: the small scores stay distinct and ordered, so rank measures
    # (ROC AUC) read from the file agree with the run; the cat never reached 0.001 and is left out.
    assert curves == {"dog": [0.91, 0.00012, 0.00046]}
    assert '"dog": [0.91,0.00012,0.00046]' in text


def test_page_is_self_contained_and_its_policy_allows_exactly_its_script(
    review_files: dict[str, Path],
) -> None:
    html = review_files["page"].read_text()
    assert HOSTILE not in html and TRAP not in html and "</script> &" not in html
    assert not re.search(r"(src|href)=\"https?:", html)  # nothing fetched from a network
    scripts = re.findall(r"<script>(.*?)</script>", html, flags=re.DOTALL)
    assert len(scripts) == 1
    digest = base64.b64encode(hashlib.sha256(scripts[0].encode()).digest()).decode()
    assert f"script-src 'sha256-{digest}'" in html


def test_review_refuses_to_overwrite_a_page(
    review_files: dict[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    page = review_files["page"]
    assert (
        main(
            [
                "review",
                str(review_files["media"]),
                "--captions",
                str(review_files["captions"]),
                "-o",
                str(page),
            ]
        )
        == 2
    )
    assert "already exists" in capsys.readouterr().err


def test_review_names_a_missing_caption_file(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    media = write_wav(tmp_path / "a.wav", tone(1.0))
    assert main(["review", str(media), "-o", str(tmp_path / "a.html")]) == 2
    assert "a.sounds.vtt: subtitle file not found" in capsys.readouterr().err
    assert not (tmp_path / "a.html").exists()


# ---- in the browser --------------------------------------------------------------------

CHROME_FLAGS = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
)


@pytest.fixture(scope="module")
def browser(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Any]:
    chromium, driver_path = shutil.which("chromium"), shutil.which("chromedriver")
    try:
        from selenium import webdriver
        from selenium.webdriver.chrome.service import Service
    except ImportError:
        webdriver = None  # type: ignore[assignment]
    if webdriver is None or not chromium or not driver_path:
        if os.environ.get("CI"):
            pytest.fail("CI must run the browser tests: install chromium, chromium-driver and selenium")
        pytest.skip("needs Debian's chromium + chromium-driver and selenium")
    options = webdriver.ChromeOptions()
    options.binary_location = chromium
    for flag in (*CHROME_FLAGS, "--window-size=1280,900", "--autoplay-policy=no-user-gesture-required"):
        options.add_argument(flag)
    downloads = tmp_path_factory.mktemp("downloads")
    options.add_experimental_option(
        "prefs", {"download.default_directory": str(downloads), "download.prompt_for_download": False}
    )
    options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    driver = webdriver.Chrome(options=options, service=Service(driver_path))
    driver.execute_cdp_cmd("Page.setDownloadBehavior", {"behavior": "allow", "downloadPath": str(downloads)})
    driver.downloads = downloads
    try:
        yield driver
    finally:
        driver.quit()


def _open(browser: Any, page: Path) -> None:
    browser.get(page.as_uri())
    _wait(
        lambda: browser.execute_script("return document.querySelector('audio, video').readyState") >= 1,
        "media metadata",
    )
    browser.get_log("browser")  # start each test with an empty log


def _wait(condition: Callable[[], Any], what: str, seconds: float = 10.0) -> Any:
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        value = condition()
        if value:
            return value
        time.sleep(0.05)
    raise AssertionError(f"timed out waiting for {what}")


def _errors(browser: Any) -> list[dict[str, Any]]:
    return [entry for entry in browser.get_log("browser") if entry["level"] == "SEVERE"]


def _by_css(browser: Any, selector: str) -> list[Any]:
    return browser.find_elements("css selector", selector)


def test_page_loads_cleanly_and_shows_every_cue(browser: Any, review_files: dict[str, Path]) -> None:
    browser.get(review_files["page"].as_uri())
    _wait(
        lambda: browser.execute_script("return document.querySelector('audio').readyState") >= 1,
        "media metadata",
    )
    assert _errors(browser) == []
    track = webvtt.read(str(review_files["captions"]))
    assert len(_by_css(browser, ".cue-row")) == len(track.captions) == len(_by_css(browser, ".cue-block"))
    assert len(_by_css(browser, ".dropped-row")) == 1
    assert len(_by_css(browser, ".timeline polyline")) == 2 and len(_by_css(browser, ".speech-span")) == 2


def test_hostile_text_shows_literally_and_runs_nothing(browser: Any, review_files: dict[str, Path]) -> None:
    _open(browser, review_files["page"])
    texts = [area.get_property("value") for area in _by_css(browser, ".cue-text")]
    assert texts[1] == HOSTILE
    assert _by_css(browser, ".cue-block")[1].get_property("textContent") == HOSTILE
    assert TRAP in _by_css(browser, ".dropped-row .reason")[0].text
    assert browser.execute_script("return document.title") == f"Review: {MEDIA_NAME}"
    assert browser.execute_script(
        "return [window.pwned, document.querySelectorAll('main script, main img').length]"
    ) == [None, 0]
    _by_css(browser, ".cue-block")[1].click()  # the live track renders it too
    _wait(lambda: browser.find_element("id", "now-showing").text == HOSTILE, "the caption at the playhead")
    assert browser.execute_script("return window.pwned") is None
    assert _errors(browser) == []


def test_clicking_a_cue_moves_the_player(browser: Any, review_files: dict[str, Path]) -> None:
    _open(browser, review_files["page"])
    _by_css(browser, ".cue-block")[2].click()
    assert _wait(
        lambda: (
            abs(browser.execute_script("return document.querySelector('audio').currentTime") - 4.0) < 0.05
        ),
        "seek to 4.0 s",
    )
    _by_css(browser, ".cue-row .seek")[0].click()
    assert _wait(
        lambda: (
            abs(browser.execute_script("return document.querySelector('audio').currentTime") - 1.0) < 0.05
        ),
        "seek to 1.0 s",
    )


def test_keyboard_moves_between_cues_and_nudges_times(browser: Any, review_files: dict[str, Path]) -> None:
    _open(browser, review_files["page"])
    body = browser.find_element("tag name", "body")
    body.send_keys("n")  # from the first cue to the second
    assert _wait(
        lambda: (
            abs(browser.execute_script("return document.querySelector('audio').currentTime") - 2.5) < 0.05
        ),
        "next cue",
    )
    browser.switch_to.active_element.send_keys("]]}")
    cues = list(
        webvtt.from_buffer(
            io.StringIO(browser.execute_script("return window.soundCaptionReview.exportText('vtt')"))
        ).captions
    )
    assert (cues[1].start, cues[1].end) == ("00:00:02.700", "00:00:03.600")
    active = browser.switch_to.active_element
    assert active.get_attribute("class") == "cue-block"  # focus stays somewhere visible
    assert active.value_of_css_property("outline-style") != "none"


def test_edit_delete_promote_then_export_parses(browser: Any, review_files: dict[str, Path]) -> None:
    _open(browser, review_files["page"])
    text = _by_css(browser, ".cue-text")[0]
    text.clear()
    text.send_keys("[door slams & rattles]")
    end = _by_css(browser, ".cue-end")[0]
    end.clear()
    end.send_keys("00:02.250\n")
    _by_css(browser, ".cue-row .delete")[2].click()
    _by_css(browser, ".promote")[0].click()
    assert (
        len(_by_css(browser, ".cue-row"))
        == 3
        == browser.execute_script("return document.querySelector('audio').textTracks[0].cues.length")
    )

    vtt_text = browser.execute_script("return window.soundCaptionReview.exportText('vtt')")
    cues = list(webvtt.from_buffer(io.StringIO(vtt_text)).captions)
    assert [(c.start, c.end, c.raw_text) for c in cues] == [
        ("00:00:01.000", "00:00:02.250", "[door slams &amp; rattles]"),
        ("00:00:02.500", "00:00:03.500", HOSTILE_VTT),
        ("00:00:05.400", "00:00:05.900", '[&lt;img src=x onerror="window.pwned=1"&gt;]'),
    ]
    srt_cues = list(srt.parse(browser.execute_script("return window.soundCaptionReview.exportText('srt')")))
    assert [s.content for s in srt_cues] == ["[door slams & rattles]", HOSTILE, f"[{TRAP}]"]
    assert _errors(browser) == []


def test_save_downloads_a_track_that_update_respects(browser: Any, review_files: dict[str, Path]) -> None:
    _open(browser, review_files["page"])
    text = _by_css(browser, ".cue-text")[2]
    text.clear()
    text.send_keys("[small dog yapping]")
    _by_css(browser, ".cue-row .delete")[0].click()
    for old in browser.downloads.glob("*"):
        old.unlink()
    browser.find_element("id", "save-vtt").click()
    saved = _wait(lambda: [p for p in browser.downloads.glob("beeps*.vtt")], "the download")[0]
    _wait(lambda: saved.stat().st_size > 0, "the download to finish")
    body = saved.read_text()
    assert [c.raw_text for c in webvtt.from_buffer(io.StringIO(body)).captions] == [
        HOSTILE_VTT,
        "[small dog yapping]",
    ]

    # the saved file keeps the record, so a re-run keeps the edit and the deletion
    record = update.read_record(body)
    assert record is not None
    merged, summary = update.reconcile(parse_subtitles(body, "vtt"), record, MACHINE, "note")
    assert "[small dog yapping]" in merged and "[door slams]" not in merged
    assert (summary.kept_edited, summary.deleted) == (1, 1)
