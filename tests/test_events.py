"""Events and dialogue spans from hand-made score tracks: each detection rule alone."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.ndimage import median_filter

from captioner.dialogue import overlap_ms, speech_spans
from captioner.events import Span, ancestry, bridge, detect_events, hysteresis
from captioner.scores import ScoreTrack
from captioner.style import Detection
from captioner.vocabulary import ClassEntry, Kind, Vocabulary

HOP, PATCH, FRAME = 480, 960, 10.0

VOCAB = Vocabulary(
    (
        ClassEntry(0, "Speech", "speech", "speech", "person speaks", Kind.SPEECH, 3, None),
        ClassEntry(1, "Vehicle", "vehicle", "vehicle driving", "vehicle drives", Kind.CONTINUOUS, 3, None),
        ClassEntry(
            2, "Car horn", "car_horn", "car horn honking", "car horn honks", Kind.TRANSIENT, 4, "vehicle"
        ),
        ClassEntry(3, "Telephone", "telephone", "phone ringing", "phone rings", Kind.CONTINUOUS, 4, None),
        ClassEntry(4, "Silence", "silence", "silence", "silence", Kind.IGNORE, 1, None),
        ClassEntry(
            5, "Air horn", "air_horn", "air horn blaring", "air horn blares", Kind.TRANSIENT, 4, "car_horn"
        ),
    )
)
SPEECH, VEHICLE, HORN, PHONE, SILENCE = 0, 1, 2, 3, 4


def make_track(n_patches: int = 40, level_db: float = -30.0) -> tuple[np.ndarray, np.ndarray]:
    """Zero scores and a flat signal level; callers fill in what the test needs."""
    duration = (n_patches - 1) * HOP + PATCH
    return np.zeros((n_patches, len(VOCAB.entries)), np.float32), np.full(
        int(duration / FRAME), level_db, np.float32
    )


def track_of(scores: np.ndarray, energy: np.ndarray) -> ScoreTrack:
    duration = (scores.shape[0] - 1) * HOP + PATCH
    return ScoreTrack(
        scores=scores, hop_ms=HOP, patch_ms=PATCH, energy_db=energy, frame_ms=FRAME, duration_ms=duration
    )


def events_of(track: ScoreTrack, **changes: object) -> list:
    return detect_events(track, VOCAB, Detection(**changes))  # type: ignore[arg-type]


def test_hysteresis_is_a_double_threshold() -> None:
    curve = np.array([0.0, 0.2, 0.6, 0.2, 0.0, 0.2, 0.0])
    assert hysteresis(curve, 0.5, 0.15) == [(1, 4)]  # the low offset threshold keeps the shoulders
    assert hysteresis(curve, 0.5, 0.5) == [(2, 3)]  # a single threshold would cut them off


def test_a_one_patch_transient_survives_where_a_median_filter_erases_it() -> None:
    scores, energy = make_track()
    scores[20, HORN] = 0.9
    # DCASE-style median smoothing over 3 patches removes a sound that fills one patch ...
    assert median_filter(scores[:, HORN], size=3, mode="nearest").max() == 0.0
    # ... so short sounds are never median-filtered, even when the setting asks for it.
    found = events_of(track_of(scores, energy), median_ms=1440)
    assert [e.concept for e in found] == ["car_horn"]


def test_bridge_joins_a_flickering_sound_into_one_event() -> None:
    scores, energy = make_track()
    scores[10:22:2, PHONE] = 0.8  # high in every other patch only, as alarms and rings often score
    bridged = events_of(track_of(scores, energy), bridge_ms=1440, merge_gap_ms=0)
    unbridged = events_of(track_of(scores, energy), bridge_ms=0, merge_gap_ms=0, lasting_min_active_ms=0)
    assert len(bridged) == 1
    assert len(unbridged) == 6
    assert bridged[0].start_ms < unbridged[0].start_ms  # the bridge reaches back towards the onset


def test_bridge_never_lowers_a_score() -> None:
    curve = np.random.default_rng(1).random(50)
    assert np.all(bridge(curve, 3) >= curve)
    assert np.array_equal(bridge(curve, 1), curve)


def test_a_lasting_sound_needs_more_than_one_active_patch() -> None:
    scores, energy = make_track()
    scores[20, PHONE] = 0.6
    assert events_of(track_of(scores, energy)) == []
    assert [e.concept for e in events_of(track_of(scores, energy), lasting_min_active_ms=0)] == ["telephone"]
    scores[21, PHONE] = 0.6
    assert [e.concept for e in events_of(track_of(scores, energy))] == ["telephone"]


def test_one_sure_patch_is_enough_for_a_lasting_sound() -> None:
    scores, energy = make_track()
    scores[20, PHONE] = 0.8  # above lasting_sure_score (0.7)
    assert [e.concept for e in events_of(track_of(scores, energy))] == ["telephone"]
    assert events_of(track_of(scores, energy), lasting_sure_score=1.0) == []


def test_speech_and_ignored_classes_never_become_events() -> None:
    scores, energy = make_track()
    scores[5:30, SPEECH] = 0.99
    scores[5:30, SILENCE] = 0.99
    assert events_of(track_of(scores, energy)) == []


def test_onset_moves_to_the_rise_in_signal_level_inside_the_first_patch() -> None:
    scores, energy = make_track(level_db=-60.0)
    scores[20:24, VEHICLE] = 0.8
    onset_ms = 20 * HOP + 310  # the sound starts 310 ms into the first active patch
    energy[int(onset_ms / FRAME) :] = -20.0
    refined = events_of(track_of(scores, energy), bridge_ms=0)[0]
    plain = events_of(track_of(scores, energy), bridge_ms=0, onset_refine=False)[0]
    assert abs(refined.start_ms - onset_ms) <= 30
    assert abs(plain.start_ms - onset_ms) > 100
    assert refined.start_ms < refined.end_ms


def test_onset_refinement_never_moves_past_the_event_end() -> None:
    scores, energy = make_track(level_db=-60.0)
    scores[20, HORN] = 0.9
    energy[int((20 * HOP + 900) / FRAME) :] = -10.0  # a loud rise at the very end of the patch
    (event,) = events_of(track_of(scores, energy), bridge_ms=0)
    assert event.start_ms < event.end_ms


def test_event_level_and_background_come_from_the_signal() -> None:
    scores, energy = make_track(level_db=-50.0)
    scores[20:24, VEHICLE] = 0.8
    energy[int(20 * HOP / FRAME) : int((23 * HOP + PATCH) / FRAME)] = -20.0
    (event,) = events_of(track_of(scores, energy), bridge_ms=0)
    assert event.level_db == pytest.approx(-20.0)
    assert event.background_db == pytest.approx(-50.0)
    assert event.contrast_db == pytest.approx(30.0)


def test_ancestry_lists_every_broader_concept_nearest_first() -> None:
    assert ancestry(VOCAB)["air_horn"] == ("car_horn", "vehicle")
    assert ancestry(VOCAB)["vehicle"] == ()


def test_speech_spans_use_their_own_thresholds() -> None:
    scores, energy = make_track()
    scores[10:20, SPEECH] = 0.45  # above the sound onset threshold, below speech_onset
    track = track_of(scores, energy)
    assert speech_spans(track, VOCAB, Detection(speech_onset=0.5, speech_offset=0.3)) == ()
    (span,) = speech_spans(track, VOCAB, Detection(speech_onset=0.4, speech_offset=0.3))
    assert span == Span(10 * HOP, 19 * HOP + PATCH)


def test_overlap_with_dialogue_spans() -> None:
    spans = (Span(0, 1500), Span(2500, 9000))
    assert overlap_ms(1000, 3000, spans) == 1000
    assert overlap_ms(1500, 2500, spans) == 0


def test_noise_floor_is_the_quiet_part_of_the_surroundings_not_its_median() -> None:
    # Dialogue around a sound: loud words with short pauses. The median is the speech level;
    # the floor (a low percentile) is the pauses, which is what "near silence" means.
    scores, energy = make_track(level_db=-60.0)
    words = np.arange(energy.size) % 100 < 80  # 0.8 s of speech, 0.2 s pause
    energy[words] = -20.0
    scores[20:22, HORN] = 0.8
    energy[int(20 * HOP / FRAME) : int((21 * HOP + PATCH) / FRAME)] = -15.0
    (event,) = events_of(track_of(scores, energy), bridge_ms=0)
    assert event.background_db == pytest.approx(-20.0)
    assert event.floor_db == pytest.approx(-60.0)
    assert event.contrast_db == pytest.approx(5.0)
    assert event.above_floor_db == pytest.approx(45.0)


def test_the_generic_flag_of_a_class_reaches_its_events() -> None:
    vocabulary = Vocabulary(
        (
            *VOCAB.entries[:5],
            ClassEntry(5, "Beep, bleep", "beep", "beeping", "device beeps", Kind.TRANSIENT, 2, None, True),
        )
    )
    scores, energy = make_track()
    scores[10:12, 5] = 0.8
    scores[20:22, HORN] = 0.8
    found = {
        e.concept: e.generic
        for e in detect_events(track_of(scores, energy), vocabulary, Detection(bridge_ms=0))
    }
    assert found == {"beep": True, "car_horn": False}


def test_a_sound_filling_the_whole_input_has_no_background_to_compare_with() -> None:
    scores, energy = make_track(n_patches=20, level_db=-15.0)
    scores[:, PHONE] = 0.9  # rings from the first patch to the last
    whole = events_of(track_of(scores, energy))
    assert (
        len(whole) == 1 and whole[0].floor_db == whole[0].background_db == -100.0
    )  # unknown: only the level counts
    scores[:, PHONE] = 0.0
    scores[5:10, PHONE] = 0.9  # a ring with quiet surroundings keeps a measured floor
    energy[:] = -50.0
    energy[int(5 * HOP / FRAME) : int((9 * HOP + PATCH) / FRAME)] = -15.0
    part = events_of(track_of(scores, energy))
    assert len(part) == 1 and part[0].floor_db == pytest.approx(-50.0) and part[0].above_floor_db > 30
