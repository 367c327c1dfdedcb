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

import numpy as np
import pytest
import srt
import webvtt

from captioner import review, update
from captioner.cli import main
from captioner.cues import Cue
from captioner.formats.subtitles import parse_subtitles
from conftest import RATE, tone, write_wav

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
    data = review.page_data(inputs, review.media_link(review_files["media"], review_files["page"]))
    assert [c["text"] for c in data["cues"]] == [
        "[door slams]",
        HOSTILE,
        "[dog barking]",
    ]  # entities decoded once
    assert data["media"] == {"src": "../beeps%20%26%20%3Ci%3E.wav", "name": MEDIA_NAME, "kind": "audio"}
    assert [d["id"] for d in data["dropped"]] == ["e0004"] and data["dropped"][0]["text"] == f"[{TRAP}]"
    # every concept of a cue or a dropped candidate gets its curve, no other, strongest first
    assert data["curves"]["order"] == ["dog", "glass"] == list(data["curves"]["concepts"])
    assert list(base64.b64decode(data["curves"]["concepts"]["dog"]))[7:12] == [26, 204, 204, 204, 26]
    assert [c["concept"] for c in data["cues"]] == ["", "", "dog"]  # e0003 is the dog event
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
    assert [d["text"] for d in review.page_data(inputs, "clip.wav")["dropped"]] == ["DOG BARKS"]
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
    body.send_keys("d")  # from the first cue to the second
    assert _wait(
        lambda: (
            abs(browser.execute_script("return document.querySelector('audio').currentTime") - 2.5) < 0.05
        ),
        "next cue",
    )
    browser.switch_to.active_element.send_keys("wwr")  # start 200 ms later, end 100 ms later
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


# ---- waveform, inline tags, palette ------------------------------------------------------


def test_peak_envelope_holds_each_windows_extremes_whatever_the_chunking() -> None:
    from captioner.media import peak_envelope

    samples = np.concatenate((tone(0.5, 50.0, 0.5), np.zeros(4000), [0.25]))  # 0.75 s + 1 sample
    whole = peak_envelope([samples.astype(np.float32)], sample_rate=RATE, hop_ms=50)
    pieces = np.array_split(samples.astype(np.float32), 7)  # chunks that end mid-window
    assert np.array_equal(peak_envelope(pieces, sample_rate=RATE, hop_ms=50), whole)
    assert whole.dtype == np.int8 and whole.shape == (16, 2)  # 15 full windows of 800 samples + 1
    assert whole[:10, 0].min() == -64 and whole[:10, 1].max() == 64  # 0.5 full scale = 63.5 → 64
    assert not whole[10:15].any() and list(whole[15]) == [32, 32]


def test_the_page_carries_the_waveform_of_the_media(review_files: dict[str, Path]) -> None:
    html = review_files["page"].read_text()
    data = json.loads(re.search(r'id="review-data">(.*?)</script>', html, flags=re.DOTALL)[1])  # type: ignore[index]
    peaks = np.frombuffer(base64.b64decode(data["waveform"]["peaks"]), dtype=np.int8).reshape(-1, 2)
    assert data["waveform"]["hop_ms"] == 50 and len(peaks) == 120  # 6 s of 50 ms windows
    assert abs(int(peaks[:, 1].max()) - round(0.2 * 127)) <= 1  # the fixture's tone peaks at 0.2


def test_editor_text_keeps_inline_tags_and_decodes_references() -> None:
    assert review.editor_text("<i>door</i> &amp; <c.loud>bang</c> &lt;3", "vtt") == (
        "<i>door</i> & <c.loud>bang</c> <3"
    )
    assert review.editor_text("<i>a</i> &amp; b", "srt") == "<i>a</i> &amp; b"  # SRT has no references


def _srgb_linear(rgb: np.ndarray) -> np.ndarray:
    # IEC 61966-2-1 sRGB transfer function
    return np.where(rgb <= 0.04045, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)


def _palette_distances(kind: str | None) -> np.ndarray:
    """Pairwise CIEDE2000 distances between the palette's colours, as seen with `kind` of CVD."""
    import colour
    from colour.blindness import matrix_cvd_Machado2009

    rgb = np.array([[int(c[i : i + 2], 16) / 255 for i in (1, 3, 5)] for c in review.PALETTE])
    if kind:
        # Machado, Oliveira & Fernandes 2009: the simulation works on linear RGB
        seen = np.clip(_srgb_linear(rgb) @ matrix_cvd_Machado2009(kind, 1.0).T, 0, 1)
        rgb = colour.cctf_encoding(seen)
    lab = colour.XYZ_to_Lab(colour.sRGB_to_XYZ(rgb))
    n = len(rgb)
    return np.array(
        [colour.delta_E(lab[i], lab[j], method="CIE 2000") for i in range(n) for j in range(i + 1, n)]
    )


@pytest.mark.parametrize("kind", [None, "Deuteranomaly", "Protanomaly"])
def test_curve_colours_stay_apart_with_normal_vision_and_red_green_deficiencies(kind: str | None) -> None:
    import colour

    # the reference implementation reproduces Sharma, Wu & Dalal (2005) test pair 1: 2.0425
    assert abs(colour.delta_E([50, 2.6772, -79.7751], [50, 0, -82.7485], method="CIE 2000") - 2.0425) < 1e-4
    assert len(review.PALETTE) == 20 == len(set(review.PALETTE))
    # a ΔE00 of 8 or more is an obvious difference side by side (common practice: ~2 is just noticeable)
    assert _palette_distances(kind).min() >= 8.5


def test_curve_colours_contrast_with_the_timeline() -> None:
    rgb = np.array([[int(c[i : i + 2], 16) / 255 for i in (1, 3, 5)] for c in review.PALETTE])
    luminance = _srgb_linear(rgb) @ np.array([0.2126, 0.7152, 0.0722])
    # WCAG 2.1 relative luminance and contrast ratio against white; 1.4.11 asks 3:1 for graphics
    assert ((1.05 / (luminance + 0.05)) >= 3.0).all()


# ---- working in the page ---------------------------------------------------------------


def _export(browser: Any) -> list[Any]:
    text = browser.execute_script("return window.soundCaptionReview.exportText('vtt')")
    return list(webvtt.from_buffer(io.StringIO(text)).captions)


def _now(browser: Any) -> float:
    return float(browser.execute_script("return document.querySelector('audio').currentTime"))


def _view(browser: Any) -> dict[str, float]:
    return dict(browser.execute_script("return window.soundCaptionReview.view()"))


def _ctrl(browser: Any, key: str, shift: bool = False) -> None:
    from selenium.webdriver.common.action_chains import ActionChains
    from selenium.webdriver.common.keys import Keys

    chain = ActionChains(browser).key_down(Keys.CONTROL)
    if shift:
        chain = chain.key_down(Keys.SHIFT)
    chain = chain.send_keys(key)
    if shift:
        chain = chain.key_up(Keys.SHIFT)
    chain.key_up(Keys.CONTROL).perform()


def test_undo_and_redo_step_through_edits(browser: Any, review_files: dict[str, Path]) -> None:
    _open(browser, review_files["page"])
    text = _by_css(browser, ".cue-text")[0]
    text.send_keys(" loudly")  # seven keystrokes: one undo step
    _by_css(browser, ".cue-row .delete")[2].click()
    assert [c.text for c in _export(browser)] == ["[door slams] loudly", HOSTILE_VTT]
    body = browser.find_element("tag name", "body")
    body.click()
    _ctrl(browser, "z")
    assert [c.text for c in _export(browser)] == ["[door slams] loudly", HOSTILE_VTT, "[dog barking]"]
    _ctrl(browser, "z")
    assert _export(browser)[0].text == "[door slams]"
    assert _by_css(browser, ".cue-text")[0].get_property("value") == "[door slams]"
    _ctrl(browser, "z", shift=True)
    assert _export(browser)[0].text == "[door slams] loudly"
    assert browser.find_element("id", "redo").is_enabled()
    assert _errors(browser) == []


def _leaving_is_questioned(browser: Any) -> bool:
    return bool(
        browser.execute_script(
            "const e = new Event('beforeunload', {cancelable: true}); "
            "window.dispatchEvent(e); return e.defaultPrevented"
        )
    )


def test_leaving_with_unsaved_edits_asks_first(browser: Any, review_files: dict[str, Path]) -> None:
    _open(browser, review_files["page"])
    assert not _leaving_is_questioned(browser)
    assert browser.find_element("id", "unsaved").is_displayed() is False
    _by_css(browser, ".cue-text")[1].send_keys("!")
    assert _leaving_is_questioned(browser) and browser.find_element("id", "unsaved").is_displayed()
    assert browser.execute_script("return document.title").startswith("• ")
    for old in browser.downloads.glob("*"):
        old.unlink()
    browser.find_element("id", "save-vtt").click()  # the download holds the edits now
    assert not _leaving_is_questioned(browser)
    _by_css(browser, ".cue-text")[1].send_keys("!")
    assert _leaving_is_questioned(browser)
    # (headless Chromium leaves without showing its dialog, so the event's cancellation, which
    # is what makes a browser ask (HTML Living Standard, "unloading documents"), is checked)


def test_dragging_a_cue_edge_moves_that_time_only(browser: Any, review_files: dict[str, Path]) -> None:
    from selenium.webdriver.common.action_chains import ActionChains

    _open(browser, review_files["page"])
    view = _view(browser)
    width = browser.execute_script("return document.getElementById('timeline').clientWidth")
    ms_per_px = view["span"] / width
    browser.execute_script("document.getElementById('timeline').scrollIntoView({block: 'center'})")
    edge = _by_css(browser, ".cue-block")[0].find_element("css selector", ".cue-edge.end")
    ActionChains(browser).click_and_hold(edge).move_by_offset(60, 0).release().perform()
    first = _export(browser)[0]
    moved_ms = round(60 * ms_per_px / 10) * 10
    assert first.start == "00:00:01.000"
    assert abs(webvtt_ms(first.end) - (2000 + moved_ms)) <= 20  # snapped to 10 ms
    edge = _by_css(browser, ".cue-block")[0].find_element("css selector", ".cue-edge.start")
    to_page_edge = -int(edge.location["x"] + edge.size["width"] / 2 - 1)  # left of the timeline
    ActionChains(browser).click_and_hold(edge).move_by_offset(to_page_edge, 0).release().perform()
    assert _export(browser)[0].start == "00:00:00.000"  # never before the start of the file
    assert abs(_now(browser) - 0.0) < 0.01  # a drag is not a click: the player stayed put
    _by_css(browser, ".cue-block")[2].click()  # and the next click is a click again
    _wait(lambda: abs(_now(browser) - 4.0) < 0.05, "seek to 4.0 s")
    assert _errors(browser) == []


def webvtt_ms(stamp: str) -> int:
    hours, minutes, seconds = stamp.split(":")
    return round((int(hours) * 3600 + int(minutes) * 60 + float(seconds)) * 1000)


def test_zoom_from_the_whole_file_to_seconds_with_a_ruler(
    browser: Any, review_files: dict[str, Path]
) -> None:
    _open(browser, review_files["page"])
    assert _view(browser) == {"start": 0, "span": 6000}
    ticks = [t.text for t in _by_css(browser, ".ruler .tick")]
    assert ticks[:2] == ["00:00", "00:01"]
    browser.find_element("id", "zoom-in").click()
    assert _view(browser)["span"] == 3000
    browser.find_element("tag name", "body").send_keys("+")
    assert _view(browser)["span"] == 2000  # the closest view: two seconds
    ticks = [t.text for t in _by_css(browser, ".ruler .tick")]
    assert len(ticks) >= 4 and ticks[1] in ("00:00.200", "00:00.500")
    browser.find_element("tag name", "body").send_keys("0")
    assert _view(browser)["span"] == 6000


def test_the_timeline_shows_where_the_player_goes_and_follows_playback(
    browser: Any, review_files: dict[str, Path]
) -> None:
    _open(browser, review_files["page"])
    browser.execute_script("window.soundCaptionReview.setView(0, 2000)")
    _by_css(browser, ".cue-row .seek")[2].click()  # Go to 00:04.000, outside the view
    view = _view(browser)
    assert view["start"] <= 4000 <= view["start"] + view["span"]
    assert len(_by_css(browser, ".cue-block")) == 1  # only the cues in view are drawn
    browser.execute_script(
        "window.soundCaptionReview.setView(0, 2000); document.querySelector('audio').currentTime = 1.5"
    )
    browser.execute_script("document.querySelector('audio').play()")
    _wait(lambda: _now(browser) > 2.6, "playback past the view", seconds=15)
    view = _view(browser)
    now_ms = _now(browser) * 1000
    assert view["start"] > 0 and view["start"] <= now_ms <= view["start"] + view["span"]
    browser.execute_script("document.querySelector('audio').pause()")


def test_space_pauses_where_it_is_after_moving_to_a_cue(browser: Any, review_files: dict[str, Path]) -> None:
    _open(browser, review_files["page"])
    body = browser.find_element("tag name", "body")
    body.send_keys("d")
    assert _wait(lambda: abs(_now(browser) - 2.5) < 0.05, "the second cue")
    browser.switch_to.active_element.send_keys(" ")
    _wait(lambda: _now(browser) > 2.9, "playback")
    browser.switch_to.active_element.send_keys(" ")
    paused_at = _now(browser)
    assert browser.execute_script("return document.querySelector('audio').paused")
    assert paused_at > 2.9  # paused, not sent back to the cue's start
    body.send_keys("k")  # not a key of this page
    assert browser.execute_script("return document.querySelector('audio').paused")


def test_the_key_list_on_the_page_is_the_key_map(browser: Any, review_files: dict[str, Path]) -> None:
    _open(browser, review_files["page"])
    listed = [dt.text for dt in _by_css(browser, "#key-list dt")]
    assert "Ctrl+Z" in listed and "Ctrl+Shift+Z / Ctrl+Y" in listed and "x" in listed
    assert len(listed) == len(_by_css(browser, "#key-list dd")) >= 12


def test_an_error_message_clears_once_the_entry_is_right(browser: Any, review_files: dict[str, Path]) -> None:
    _open(browser, review_files["page"])
    end = _by_css(browser, ".cue-end")[0]
    end.clear()
    end.send_keys("00:00.500\n")  # before the start
    status = browser.find_element("id", "status")
    assert "end comes after the start" in status.text and "error" in status.get_attribute("class")
    assert end.get_attribute("aria-invalid") == "true"
    end = _by_css(browser, ".cue-end")[0]
    end.clear()
    end.send_keys("00:02.400\n")
    assert "end comes after the start" not in status.text and "error" not in status.get_attribute("class")
    assert _by_css(browser, ".cue-end")[0].get_attribute("aria-invalid") is None
    assert _export(browser)[0].end == "00:00:02.400"


def test_split_at_the_playhead_and_merge_back(browser: Any, review_files: dict[str, Path]) -> None:
    _open(browser, review_files["page"])
    browser.execute_script("document.querySelector('audio').currentTime = 1.5")
    _wait(lambda: abs(_now(browser) - 1.5) < 0.01, "the seek")
    browser.find_element("tag name", "body").send_keys("x")
    cues = _export(browser)
    assert [(c.start, c.end, c.identifier) for c in cues[:2]] == [
        ("00:00:01.000", "00:00:01.500", "e0001"),
        ("00:00:01.500", "00:00:02.000", None),  # the new half is a hand-added cue
    ]
    _by_css(browser, ".cue-row .seek")[0].click()
    browser.find_element("tag name", "body").send_keys("m")
    cues = _export(browser)
    assert len(cues) == 3 and (cues[0].start, cues[0].end) == ("00:00:01.000", "00:00:02.000")
    assert cues[0].text == "[door slams]\n[door slams]"


TAGGED = """WEBVTT

e0001
00:00:01.000 --> 00:00:02.000
<i>door</i> slams &amp; <c.loud>bangs</c>

e0002
00:00:02.500 --> 00:00:03.500 line:0
<v Narrator>[music]</v> &lt;3
"""


def test_inline_tags_and_settings_are_kept_on_save(browser: Any, tmp_path: Path) -> None:
    media = write_wav(tmp_path / "clip.wav", tone(4.0))
    (tmp_path / "clip.sounds.vtt").write_text(TAGGED)
    page = tmp_path / "clip.html"
    assert main(["review", str(media), "-o", str(page)]) == 0
    _open(browser, page)
    assert _by_css(browser, ".cue-text")[0].get_property("value") == "<i>door</i> slams & <c.loud>bangs</c>"
    assert _by_css(browser, ".cue-block")[0].get_property("textContent") == "door slams & bangs"
    _by_css(browser, ".cue-text")[1].send_keys(" <b>again</b>")
    vtt_text = browser.execute_script("return window.soundCaptionReview.exportText('vtt')")
    assert "<i>door</i> slams &amp; <c.loud>bangs</c>" in vtt_text
    assert "00:00:02.500 --> 00:00:03.500 line:0\n<v Narrator>[music]</v> &lt;3 <b>again</b>" in vtt_text
    srt_cues = list(srt.parse(browser.execute_script("return window.soundCaptionReview.exportText('srt')")))
    assert [c.content for c in srt_cues] == ["<i>door</i> slams & bangs", "[music] <3 <b>again</b>"]
    live = browser.execute_script(
        "return document.querySelector('audio').textTracks[0].cues[0].getCueAsHTML().firstChild.tagName"
    )
    assert live == "I"  # the player shows the italics


# ---- saving in place through the local server ------------------------------------------------


@pytest.fixture
def served_page(review_files: dict[str, Path]) -> Iterator[Any]:
    import threading

    from captioner.review_server import start_server

    server = start_server(
        review_files["media"],
        captions=review_files["captions"],
        sidecar=review_files["events"],
        waveform=review.waveform(review_files["media"]),
    )
    threading.Thread(target=server.serve_forever, daemon=True).start()
    try:
        yield server
    finally:
        server.shutdown()
        server.server_close()


def _open_served(browser: Any, server: Any) -> None:
    browser.get(server.url)
    _wait(lambda: browser.execute_script("return document.querySelector('audio').readyState") >= 1, "media")
    browser.get_log("browser")


def test_save_in_place_writes_the_track_and_update_keeps_the_edits(
    browser: Any, review_files: dict[str, Path], served_page: Any
) -> None:
    _open_served(browser, served_page)
    captions = review_files["captions"]
    before = captions.read_text()
    text = _by_css(browser, ".cue-text")[2]
    text.clear()
    text.send_keys("<i>[small dog yapping]</i>")
    _by_css(browser, ".cue-row .delete")[0].click()
    browser.find_element("id", "save").click()
    status = browser.find_element("id", "status")
    _wait(lambda: "Saved 2 cue(s) to beeps.vtt" in status.text, "the save")
    assert not browser.execute_script("return window.soundCaptionReview.dirty()")
    body = captions.read_text()
    assert body != before
    assert [c.raw_text for c in webvtt.from_buffer(io.StringIO(body)).captions] == [
        HOSTILE_VTT,
        "<i>[small dog yapping]</i>",  # the inline tag is kept
    ]
    assert update.read_record(body) == update.read_record(before)  # the record stays valid
    merged, summary = update.update_vtt(captions, MACHINE, "drafted again")
    assert "<i>[small dog yapping]</i>" in merged and "[door slams]" not in merged
    assert (summary.kept_edited, summary.deleted) == (1, 1)

    # a second save (Ctrl+S) goes over the version the first one wrote
    _by_css(browser, ".cue-text")[0].send_keys("!")
    _ctrl(browser, "s")
    _wait(lambda: "Saved 2 cue(s)" in status.text and "!" in captions.read_text(), "the second save")
    assert _errors(browser) == []


def test_a_save_over_a_file_changed_elsewhere_says_so_and_keeps_the_edits(
    browser: Any, review_files: dict[str, Path], served_page: Any
) -> None:
    _open_served(browser, served_page)
    captions = review_files["captions"]
    captions.write_text(captions.read_text().replace("[door slams]", "[door creaks]"))
    changed = captions.read_bytes()
    _by_css(browser, ".cue-text")[2].send_keys("!")
    browser.find_element("id", "save").click()
    status = browser.find_element("id", "status")
    _wait(lambda: "changed on disk" in status.text, "the refusal")
    assert captions.read_bytes() == changed
    assert browser.execute_script("return window.soundCaptionReview.dirty()")  # the edits stay unsaved
