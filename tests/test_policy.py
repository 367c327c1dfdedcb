"""Selection policy with hand-made events: each rule alone, and the setting that switches it off."""

from __future__ import annotations

import dataclasses
from dataclasses import replace

from captioner.events import SoundEvent, Span
from captioner.policy import salience, select_events
from captioner.style import Selection
from captioner.vocabulary import Kind

# A permissive base so that each test exercises one rule only.
OPEN = Selection(
    min_confidence=0.0,
    min_salience=0.0,
    evidence_gate=False,
    parent_redundancy=False,
    sibling_redundancy=False,
    generic_redundancy=False,
    generic_confidence=0.0,
    part_of_louder=False,
    dialogue_gate=False,
    dialogue_masking_db=0.0,
    gap_shift_ms=0,
    cooldown_ms=0,
    max_cues_per_minute=0,
    music_min_ms=0,
)


def event(
    event_id: str,
    concept: str,
    start_ms: int,
    end_ms: int,
    peak: float = 0.8,
    *,
    kind: Kind = Kind.TRANSIENT,
    priority: int = 3,
    parent: str | None = None,
    ancestors: tuple[str, ...] = (),
    level_db: float = -20.0,
    background_db: float = -40.0,
    phrase: str | None = None,
    label: str | None = None,
) -> SoundEvent:
    words = phrase or concept.replace("_", " ")
    return SoundEvent(
        event_id,
        concept,
        label or concept,
        words,
        words,
        kind,
        priority,
        parent,
        start_ms,
        end_ms,
        peak,
        peak * 0.8,
        level_db,
        background_db,
        ancestors or ((parent,) if parent else ()),
    )


def run(
    events: list[SoundEvent], settings: Selection, dialogue: tuple[Span, ...] = ()
) -> tuple[set[str], dict[str, str]]:
    selected = select_events(events, dialogue, settings)
    assert [d.event_id for d in selected.decisions] == [
        e.event_id for e in events
    ]  # a decision for every event, in order
    return {e.event_id for e in selected.kept}, {d.event_id: d.rule for d in selected.decisions}


def test_confidence() -> None:
    events = [event("a", "dog", 0, 1000, 0.2), event("b", "cat", 5000, 6000, 0.6)]
    assert run(events, replace(OPEN, min_confidence=0.3)) == ({"b"}, {"a": "confidence", "b": "kept"})
    assert run(events, OPEN)[0] == {"a", "b"}


def test_salience_ranks_alarms_above_faint_ambience() -> None:
    alarm = event("a", "smoke_alarm", 0, 1000, 0.45, priority=5)
    tone = event("b", "room_tone", 5000, 6000, 0.45, priority=1, kind=Kind.AMBIENCE)
    assert salience(alarm) > salience(tone)
    loud = event("c", "dog", 0, 1000, 0.5, level_db=-10.0, background_db=-40.0)
    quiet = event("d", "dog", 0, 1000, 0.5, level_db=-36.0, background_db=-40.0)
    assert salience(loud) > salience(quiet)
    assert salience(replace(loud, end_ms=3000)) > salience(loud)  # longer sounds count more
    kept, rules = run([alarm, tone], replace(OPEN, min_salience=0.55))
    assert kept == {"a"} and rules["b"] == "salience"
    assert run([alarm, tone], OPEN)[0] == {"a", "b"}


def test_evidence_gate_drops_claims_over_silence_and_over_no_contrast() -> None:
    silent = event("a", "dog", 0, 1000, level_db=-70.0, background_db=-90.0)
    flat = event("b", "cat", 5000, 6000, level_db=-30.0, background_db=-30.5)
    real = event("c", "bird", 9000, 10000, level_db=-25.0, background_db=-40.0)
    kept, rules = run([silent, flat, real], replace(OPEN, evidence_gate=True))
    assert kept == {"c"}
    assert rules["a"] == rules["b"] == "evidence"
    assert run([silent, flat, real], OPEN)[0] == {"a", "b", "c"}


def test_a_confident_child_replaces_the_parent_it_covers() -> None:
    vehicle = event("v", "vehicle", 0, 2000, 0.6, kind=Kind.CONTINUOUS)
    horn = event("h", "car_horn", 200, 1800, 0.9, priority=4, parent="vehicle")
    kept, rules = run([vehicle, horn], replace(OPEN, parent_redundancy=True))
    assert kept == {"h"} and rules["v"] == "parent"
    assert run([vehicle, horn], OPEN)[0] == {"v", "h"}


def test_a_grandchild_also_covers_its_grandparent() -> None:
    alarm = event("a", "alarm", 0, 5000, 0.5, kind=Kind.CONTINUOUS, priority=5)
    police = event(
        "p",
        "police_siren",
        0,
        5000,
        0.9,
        kind=Kind.CONTINUOUS,
        priority=5,
        parent="siren",
        ancestors=("siren", "alarm"),
    )
    assert run([alarm, police], replace(OPEN, parent_redundancy=True))[0] == {"p"}


def test_a_brief_child_does_not_erase_a_long_parent() -> None:
    vehicle = event("v", "vehicle", 0, 20000, 0.8, kind=Kind.CONTINUOUS)
    horn = event("h", "car_horn", 5000, 5500, 0.9, priority=4, parent="vehicle")
    assert run([vehicle, horn], replace(OPEN, parent_redundancy=True))[0] == {"v", "h"}


def test_an_unsure_child_yields_to_an_equally_sure_parent() -> None:
    vehicle = event("v", "vehicle", 0, 2000, 0.5, kind=Kind.CONTINUOUS)
    boat = event("b", "boat", 0, 2000, 0.5, kind=Kind.CONTINUOUS, parent="vehicle")
    kept, rules = run([vehicle, boat], replace(OPEN, parent_redundancy=True, child_confidence=0.6))
    assert kept == {"v"} and rules["b"] == "parent"


def test_music_takes_mood_wording_only_when_the_mood_is_confident() -> None:
    music = event("m", "music", 0, 30000, 0.9, kind=Kind.MUSIC, phrase="music")
    happy = event(
        "h",
        "music_mood",
        2000,
        8000,
        0.8,
        kind=Kind.MUSIC,
        parent="music",
        phrase="upbeat music",
        label="Happy music",
    )
    settings = replace(OPEN, parent_redundancy=True, music_detail_confidence=0.6)
    selected = select_events([music, happy], (), settings)
    assert [(e.event_id, e.phrase, e.start_ms) for e in selected.kept] == [("m", "upbeat music", 0)]
    unsure = select_events([music, replace(happy, peak_score=0.5)], (), settings)
    assert [(e.event_id, e.phrase) for e in unsure.kept] == [("m", "music")]
    assert {d.rule for d in unsure.decisions if not d.kept} == {"music"}


def test_overlapping_siblings_are_one_sound() -> None:
    smoke = event("s", "smoke_alarm", 1000, 6000, 0.9, priority=5, parent="alarm")
    buzzer = event("b", "buzzer", 1200, 5800, 0.5, priority=4, parent="alarm")
    later = event("c", "buzzer", 20000, 21000, 0.5, priority=4, parent="alarm")
    kept, rules = run([smoke, buzzer, later], replace(OPEN, sibling_redundancy=True))
    assert kept == {"s", "c"} and rules["b"] == "sibling"
    assert run([smoke, buzzer, later], OPEN)[0] == {"s", "b", "c"}


def test_a_sure_source_inside_a_longer_sourceless_sound_names_it() -> None:
    alarm = dataclasses.replace(event("a", "alarm", 0, 6000, 0.5, priority=4), generic=True)
    siren = event(
        "s", "police_siren", 1000, 2000, 0.75, priority=5, parent="siren", ancestors=("siren", "alarm")
    )
    settings = replace(OPEN, parent_redundancy=True)
    selected = select_events([alarm, siren], (), settings)
    assert [(e.event_id, e.phrase, e.start_ms, e.end_ms, e.generic) for e in selected.kept] == [
        ("a", "police siren", 0, 6000, False)
    ]
    assert [d.rule for d in selected.decisions] == ["kept", "parent"]
    unsure = dataclasses.replace(siren, peak_score=0.5)  # below child_confidence: both stay as they are
    assert [(e.event_id, e.phrase) for e in select_events([alarm, unsure], (), settings).kept] == [
        ("a", "alarm"),
        ("s", "police siren"),
    ]
    named = dataclasses.replace(alarm, generic=False)  # a named parent is not renamed by a brief child
    assert {e.event_id for e in select_events([named, siren], (), settings).kept} == {"a", "s"}


def test_siblings_too_close_to_tell_are_worded_as_their_parent() -> None:
    car = dataclasses.replace(
        event("c", "car_alarm", 1000, 6000, 0.50, priority=5, parent="alarm"),
        parent_wording=("alarm blaring", "alarm blares"),
    )
    smoke = event("s", "smoke_alarm", 1000, 6000, 0.44, priority=5, parent="alarm")
    settings = replace(OPEN, sibling_redundancy=True)
    selected = select_events([car, smoke], (), settings)
    assert [(e.event_id, e.phrase) for e in selected.kept] == [("c", "alarm blaring")]
    assert "too close to tell" in selected.decisions[0].detail
    assert [
        e.phrase for e in select_events([car, smoke], (), replace(settings, sibling_margin=0.0)).kept
    ] == ["car alarm"]
    sure = dataclasses.replace(car, peak_score=0.8)  # clearly the surer one: keeps its own name
    assert [e.phrase for e in select_events([sure, smoke], (), settings).kept] == ["car alarm"]


def test_dialogue_drops_low_priority_and_asks_more_confidence_of_the_rest() -> None:
    talk = (Span(0, 10000),)
    rustle = event("r", "rustling", 1000, 2000, 0.9, priority=1)
    unsure_knock = event("k", "knock", 3000, 3500, 0.6, priority=4)
    sure_knock = event("s", "knock", 6000, 6500, 0.9, priority=4)
    music = event("m", "music", 4000, 9000, 0.75, kind=Kind.MUSIC, priority=3)
    clear = event("c", "dog", 12000, 13000, 0.4, priority=3)
    settings = replace(
        OPEN,
        dialogue_gate=True,
        dialogue_min_priority=3,
        dialogue_confidence=0.7,
        dialogue_alert_confidence=0.7,
    )
    kept, rules = run([rustle, unsure_knock, sure_knock, music, clear], settings, talk)
    assert kept == {"s", "m", "c"}
    assert rules["r"] == rules["k"] == "dialogue"
    assert run([rustle, unsure_knock, sure_knock, music, clear], OPEN, talk)[0] == {"r", "k", "s", "m", "c"}


def test_a_short_event_moves_into_a_near_dialogue_gap_within_tolerance() -> None:
    talk = (Span(0, 5600), Span(9000, 12000))
    knock = event("k", "knock", 5000, 5400, 0.9, priority=4)
    far = event("f", "knock", 9200, 9600, 0.9, priority=4)  # the gap is 2.8 s away: stays
    settings = replace(OPEN, dialogue_gate=True, dialogue_confidence=0.7, gap_shift_ms=1000)
    starts = {e.event_id: e.start_ms for e in select_events([knock, far], talk, settings).kept}
    assert starts == {"k": 5600, "f": 9200}
    unmoved = {
        e.event_id: e.start_ms
        for e in select_events([knock, far], talk, replace(settings, gap_shift_ms=0)).kept
    }
    assert unmoved == {"k": 5000, "f": 9200}


def test_the_same_sound_within_the_cooldown_joins_the_earlier_event() -> None:
    first = event("a", "dog", 0, 1000, 0.7)
    again = event("b", "dog", 6000, 7000, 0.9)
    other = event("c", "cat", 3000, 4000)
    selected = select_events([first, other, again], (), replace(OPEN, cooldown_ms=10000))
    assert [(e.event_id, e.start_ms, e.end_ms, e.peak_score) for e in selected.kept] == [
        ("a", 0, 7000, 0.9),
        ("c", 3000, 4000, 0.8),
    ]
    assert {d.event_id: d.rule for d in selected.decisions}["b"] == "repeat"
    assert len(select_events([first, other, again], (), OPEN).kept) == 3


def test_a_continuous_sound_is_not_recaptioned_every_few_seconds() -> None:
    rain = [event(f"r{i}", "rain", i * 4000, i * 4000 + 3000, 0.7, kind=Kind.AMBIENCE) for i in range(10)]
    kept = select_events(rain, (), replace(OPEN, cooldown_ms=10000)).kept
    assert [(e.start_ms, e.end_ms) for e in kept] == [(0, 39000)]


def test_density_cap_keeps_the_most_salient() -> None:
    events = [event(f"e{i:02d}", f"sound{i}", i * 2000, i * 2000 + 1000, 0.3 + i * 0.02) for i in range(15)]
    events[0] = replace(events[0], peak_score=0.99, priority=5)
    kept, rules = run(events, replace(OPEN, max_cues_per_minute=12))
    assert len(kept) == 12
    assert "e00" in kept  # the loud, high-priority one survives although it comes first
    assert {rules[e] for e in ("e01", "e02", "e03")} == {"density"}
    assert len(run(events, OPEN)[0]) == 15


def test_the_evidence_gate_measures_against_the_noise_floor_not_the_dialogue() -> None:
    # Under dialogue the median of the surroundings is the speech; the floor is its pauses.
    under_talk = replace(event("a", "dog", 0, 1000, level_db=-22.0, background_db=-20.0), floor_db=-45.0)
    over_silence = replace(event("b", "cat", 5000, 6000, level_db=-42.0, background_db=-44.0), floor_db=-45.0)
    kept, rules = run(
        [under_talk, over_silence],
        replace(OPEN, evidence_gate=True, min_contrast_db=6.0, safety_confidence=1.0),
    )
    assert kept == {"a"} and rules["b"] == "evidence"


def test_a_confident_safety_sound_passes_the_evidence_gate_without_contrast() -> None:
    siren = replace(
        event("s", "siren", 0, 4000, 0.5, priority=5, level_db=-25.0, background_db=-24.0), floor_db=-27.0
    )
    horn = replace(
        event("h", "car_horn", 6000, 7000, 0.9, priority=4, level_db=-25.0, background_db=-24.0),
        floor_db=-27.0,
    )
    whisper = replace(
        event("w", "siren", 9000, 10000, 0.9, priority=5, level_db=-70.0, background_db=-90.0), floor_db=-95.0
    )
    gate = replace(OPEN, evidence_gate=True, min_contrast_db=6.0)
    kept, rules = run([siren, horn, whisper], replace(gate, safety_confidence=0.5))
    assert kept == {"s"}
    assert rules["h"] == rules["w"] == "evidence"  # near-silence is never exempt
    assert run([siren, horn, whisper], replace(gate, safety_confidence=1.0))[0] == set()


def test_a_generic_sound_yields_to_a_specific_one_of_the_same_moment() -> None:
    smoke = event("s", "smoke_alarm", 0, 4000, 0.5, priority=5, parent="alarm")
    beeping = replace(event("b", "beep", 0, 3000, 0.9, priority=2), generic=True)
    phone = event("p", "telephone", 10000, 14000, 1.0, priority=4)
    alarm = replace(event("a", "alarm", 10000, 14000, 0.95, priority=5), generic=True)
    dog = event("d", "dog", 20000, 22000, 0.99, priority=3)
    alarm_by_dog = replace(event("x", "alarm", 20000, 22000, 0.5, priority=5), generic=True)
    events = [smoke, beeping, phone, alarm, dog, alarm_by_dog]
    kept, rules = run(events, replace(OPEN, generic_redundancy=True))
    assert kept == {"s", "p", "d", "x"}  # a dog never hides an alarm
    assert rules["b"] == rules["a"] == "generic"
    assert run(events, OPEN)[0] == {"s", "b", "p", "a", "d", "x"}


def test_a_later_fragment_of_a_named_generic_sound_extends_the_specific_one() -> None:
    smoke = event("s", "smoke_alarm", 0, 3000, 0.5, priority=5)
    beeping = replace(event("b", "beep", 0, 3500, 0.9, priority=2), generic=True)
    more = replace(event("m", "beep", 5000, 7000, 0.9, priority=2), generic=True)
    selected = select_events(
        [smoke, beeping, more], (), replace(OPEN, generic_redundancy=True, cooldown_ms=6000)
    )
    assert [(e.event_id, e.start_ms, e.end_ms) for e in selected.kept] == [("s", 0, 7000)]
    assert {d.event_id: d.rule for d in selected.decisions} == {"s": "kept", "b": "generic", "m": "generic"}


def test_an_equally_sure_child_names_a_generic_parent() -> None:
    alarm = replace(event("a", "alarm", 0, 5000, 0.5, priority=5, level_db=-20.0), generic=True)
    siren = event("s", "siren", 1000, 5000, 0.5, priority=5, parent="alarm", level_db=-22.0)
    settings = replace(OPEN, parent_redundancy=True, child_confidence=0.6)
    assert run([alarm, siren], settings) == ({"s"}, {"a": "parent", "s": "kept"})
    plain = replace(alarm, generic=False)  # a parent that names its source keeps an unsure child out
    assert run([plain, siren], settings) == ({"a"}, {"a": "kept", "s": "parent"})


def test_a_lone_sourceless_sound_needs_a_sure_classifier_but_an_alert_does_not() -> None:
    animal = replace(event("a", "animal", 0, 2000, 0.68, priority=2, phrase="animal calling"), generic=True)
    sure = replace(animal, event_id="s", start_ms=10000, end_ms=12000, peak_score=0.91)
    beeping = replace(event("b", "beep", 20000, 21000, 0.5, priority=2), generic=True)
    alarm = replace(event("x", "alarm", 30000, 33000, 0.5, priority=5, kind=Kind.CONTINUOUS), generic=True)
    dog = event("d", "dog", 40000, 41000, 0.5, parent="pet")  # names its source: not affected
    events = [animal, sure, beeping, alarm, dog]
    kept, rules = run(
        events, replace(OPEN, generic_confidence=Selection().generic_confidence)
    )  # on by default
    assert kept == {"s", "x", "d"}
    assert rules["a"] == rules["b"] == "generic"
    assert run(events, OPEN)[0] == {"a", "s", "b", "x", "d"}  # 0 switches the rule off


def test_the_animal_umbrellas_are_worded_without_a_source() -> None:
    # Their wording ("animal calling", "farm animals calling") names no animal; the specific ones do.
    from importlib import resources

    import yaml

    data = yaml.safe_load(
        resources.files("captioner").joinpath("data/yamnet_vocabulary.yaml").read_text(encoding="utf-8")
    )
    assert [
        data[c].get("generic", False) for c in ("animal", "pet", "livestock", "dog", "horse", "poultry")
    ] == [True, True, True, False, False, False]


def test_default_cooldown_joins_pauses_within_a_sound_but_not_a_new_sound() -> None:
    # Common practice (North American ring cadence, from memory): 2 s ringing, 4 s silence.
    rings = [
        event(f"r{i}", "telephone", i * 6000, i * 6000 + 2000, 0.9, kind=Kind.CONTINUOUS, priority=4)
        for i in range(3)
    ]
    later = event(
        "n", "telephone", 30000, 32000, 0.9, kind=Kind.CONTINUOUS, priority=4
    )  # 16 s after the last ring
    kept = select_events([*rings, later], (), replace(OPEN, cooldown_ms=Selection().cooldown_ms)).kept
    assert [(e.event_id, e.start_ms, e.end_ms) for e in kept] == [("r0", 0, 14000), ("n", 30000, 32000)]


def test_a_gap_move_may_not_exceed_the_sync_tolerance() -> None:
    # BBC Subtitle Guidelines (from memory): a caption may lag its sound by at most the sync tolerance.
    import pytest

    from captioner.errors import StyleError
    from captioner.style import style_from_mapping

    assert (
        style_from_mapping(
            {"layout": {"sync_tolerance_ms": 1500}, "selection": {"gap_shift_ms": 1500}}
        ).selection.gap_shift_ms
        == 1500
    )
    with pytest.raises(StyleError, match="gap_shift_ms=2000 exceeds layout.sync_tolerance_ms=1500"):
        style_from_mapping({"layout": {"sync_tolerance_ms": 1500}, "selection": {"gap_shift_ms": 2000}})


def test_brief_music_is_left_out_as_a_likely_tonal_sound() -> None:
    blip = event("a", "music", 0, 1100, 0.7, kind=Kind.MUSIC)
    score = event("b", "music", 10000, 18000, 0.9, kind=Kind.MUSIC)
    knock = event("c", "knock", 20000, 20600, 0.8, priority=4)  # short non-music sounds are unaffected
    kept, rules = run([blip, score, knock], replace(OPEN, music_min_ms=3000))
    assert kept == {"b", "c"} and rules["a"] == "duration"
    assert run([blip, score, knock], OPEN)[0] == {"a", "b", "c"}


def test_music_that_dips_under_dialogue_is_not_announced_again() -> None:
    first = event("a", "music", 0, 10000, 0.9, kind=Kind.MUSIC)
    again = event("b", "music", 18000, 40000, 0.9, kind=Kind.MUSIC)  # 8 s later: still the same score
    rain = event("c", "rain", 0, 10000, 0.9, kind=Kind.CONTINUOUS)
    rain_again = event(
        "d", "rain", 18000, 30000, 0.9, kind=Kind.CONTINUOUS
    )  # other sounds keep the short cooldown
    settings = replace(OPEN, cooldown_ms=6000, music_cooldown_ms=20000)
    kept, rules = run([first, again, rain, rain_again], settings)
    assert kept == {"a", "c", "d"} and rules["b"] == "repeat"
    assert run([first, again, rain, rain_again], replace(settings, music_cooldown_ms=0))[0] == {
        "a",
        "b",
        "c",
        "d",
    }


def test_a_brief_mood_still_words_a_long_score() -> None:
    music = event("m", "music", 0, 30000, 0.9, kind=Kind.MUSIC, phrase="music")
    piano = event(
        "p", "keyboard", 2000, 3500, 0.8, kind=Kind.MUSIC, parent="music", phrase="piano music", label="Piano"
    )
    settings = replace(OPEN, parent_redundancy=True, music_detail_confidence=0.6, music_min_ms=3000)
    selected = select_events([music, piano], (), settings)
    assert [(e.event_id, e.phrase) for e in selected.kept] == [("m", "piano music")]


def test_attention_sounds_under_dialogue_need_less_confidence() -> None:
    talk = (Span(0, 10000),)
    knock = event("k", "knock", 3000, 3500, 0.6, priority=4)
    dog = event("d", "dog", 6000, 6500, 0.6, priority=3)
    settings = replace(
        OPEN,
        dialogue_gate=True,
        dialogue_min_priority=3,
        dialogue_confidence=0.7,
        dialogue_alert_confidence=0.5,
    )
    kept, rules = run([knock, dog], settings, talk)
    assert kept == {"k"} and rules["d"] == "dialogue"
    assert run([knock, dog], replace(settings, dialogue_alert_confidence=0.7), talk)[0] == set()


def test_a_music_bed_playing_from_the_first_second_needs_no_contrast() -> None:
    # Music from 0:00 has no quieter floor before it: its surroundings are the music itself
    # (+4.9 dB was measured on such a bed). Later the same contrast still fails the gate,
    # and near-silence never passes, from the start or not.
    bed = replace(event("m", "music", 0, 9000, kind=Kind.MUSIC, level_db=-25.0), floor_db=-29.9)
    later = replace(event("n", "music", 30000, 39000, kind=Kind.MUSIC, level_db=-25.0), floor_db=-29.9)
    hush = replace(event("h", "rain", 0, 9000, kind=Kind.AMBIENCE, level_db=-70.0), floor_db=-72.0)
    knock = replace(event("k", "knock", 0, 500, level_db=-25.0), floor_db=-29.9)  # short: has a floor
    gate = replace(OPEN, evidence_gate=True, min_contrast_db=6.0, safety_confidence=1.0)
    kept, rules = run([bed, later, hush, knock], gate)
    assert kept == {"m"}
    assert rules["n"] == rules["h"] == rules["k"] == "evidence"
    assert run([bed], replace(gate, opening_ms=0))[0] == set()  # the exemption switches off


def test_near_synonym_concepts_of_one_moment_are_one_sound() -> None:
    # "[rain falling]" / "[water flowing]" in one cue said one sound twice; the vocabulary
    # marks such concepts `same_sound`, and the surer one names the sound.
    rain = replace(event("r", "rain", 0, 9000, 0.7, kind=Kind.AMBIENCE), same_sound=("water",))
    water = event("w", "water", 500, 9000, 0.6, kind=Kind.AMBIENCE)
    clapping = replace(event("c", "clapping", 20000, 24000, 0.5), same_sound=("applause",))
    applause = event("a", "applause", 20000, 25000, 0.8, kind=Kind.CONTINUOUS, parent="crowd")
    elsewhere = event("x", "water", 40000, 45000, 0.6, kind=Kind.AMBIENCE)  # not the same moment
    events = [rain, water, clapping, applause, elsewhere]
    kept, rules = run(events, replace(OPEN, sibling_redundancy=True))
    assert kept == {"r", "a", "x"} and rules["w"] == rules["c"] == "sibling"
    assert run(events, OPEN)[0] == {"r", "w", "c", "a", "x"}


def test_a_same_sound_concept_never_hides_a_more_important_one() -> None:
    engine = event("v", "road_vehicle", 0, 5000, 0.9, kind=Kind.CONTINUOUS)
    siren = replace(
        event("s", "police_siren", 0, 5000, 0.6, kind=Kind.CONTINUOUS, priority=5),
        same_sound=("road_vehicle",),
    )
    kept, rules = run([engine, siren], replace(OPEN, sibling_redundancy=True))
    assert kept == {"v", "s"}  # the surer engine does not drop the siren
    louder_siren = replace(siren, peak_score=0.95)
    kept, rules = run([engine, louder_siren], replace(OPEN, sibling_redundancy=True))
    assert kept == {"s"} and rules["v"] == "sibling"


def test_a_quiet_transient_inside_a_louder_sound_is_a_part_of_it() -> None:
    glass = event("g", "glass", 28000, 30200, 0.7, level_db=-20.0, background_db=-34.0)
    tail = event("t", "gunshot", 29700, 30200, 0.6, level_db=-30.0, background_db=-22.0)  # -8 dB
    bark = event("b", "dog", 28500, 29000, 0.6, level_db=-18.0, background_db=-22.0)  # louder: a second sound
    alarm = event("a", "smoke_alarm", 29000, 29500, 0.9, priority=5, level_db=-30.0, background_db=-22.0)
    rules_on = replace(OPEN, part_of_louder=True)
    kept, rules = run([glass, tail, bark, alarm], rules_on)
    assert kept == {"g", "b", "a"} and rules["t"] == "part"
    assert run([glass, tail], OPEN)[0] == {"g", "t"}  # the switch turns the rule off
    # inside music (a score is everyone's surroundings) or only partly inside: kept
    score = event("m", "music", 0, 60000, 0.9, kind=Kind.MUSIC, level_db=-20.0, background_db=-34.0)
    late = event("l", "gunshot", 30000, 30700, 0.6, level_db=-30.0, background_db=-22.0)
    assert run([score, tail], rules_on)[0] == {"m", "t"}
    assert run([glass, late], rules_on)[0] == {"g", "l"}


def test_a_sound_loud_enough_to_mask_the_speech_is_kept_under_dialogue() -> None:
    # BBC Subtitle Guidelines §13.5: a sound that masks speech may be labelled.
    talk = (Span(0, 10000),)
    lasting = Kind.CONTINUOUS
    gale = event("g", "wind", 1000, 7000, 0.65, kind=lasting, priority=2, background_db=-41.0)  # +21 dB
    breeze = event("b", "wind", 8000, 9500, 0.65, kind=lasting, priority=2, background_db=-25.0)  # +5 dB
    unsure = event("u", "wind", 500, 900, 0.5, priority=2, background_db=-41.0)  # loud but below 0.6
    gate = replace(OPEN, dialogue_gate=True, dialogue_min_priority=3, dialogue_confidence=0.6)
    kept, rules = run([gale, breeze, unsure], replace(gate, dialogue_masking_db=15.0), talk)
    assert kept == {"g"} and rules["b"] == rules["u"] == "dialogue"
    assert run([gale, breeze, unsure], gate, talk)[0] == set()  # 0 switches the exemption off


def test_sounds_starting_together_are_kept_most_needed_first_and_take_the_lines() -> None:
    # Three sounds from the same moment, two caption lines (a CEA-608 style allows 2): the
    # screen goes to the two that salience ranks highest, whatever their ids or lengths.
    from captioner.cues import build_cues
    from captioner.style import Style

    events = [
        event("e1", "hiccup", 20_600, 24_500, 0.68),
        event("e2", "cough", 20_600, 28_300, 0.76),
        event("e3", "clock", 20_600, 28_300, 0.92),
    ]
    settings = Selection(generic_redundancy=False, sibling_redundancy=False, max_cues_per_minute=0)
    kept = select_events(events, (), settings).kept
    assert [e.event_id for e in kept] == ["e3", "e2", "e1"]
    ranks = [salience(e, settings) for e in kept]
    assert ranks == sorted(ranks, reverse=True)
    cues, dropped = build_cues(kept, Style(), 60_000)
    assert cues[0].lines == ("[clock]", "[cough]")
    assert [d.event_id for d in dropped] == ["e1"] and dropped[0].rule == "layout"


def test_a_more_needed_sound_starting_a_moment_later_takes_the_least_needed_line() -> None:
    # The clock starts 100 ms after two sounds that filled the screen's two lines: it is the
    # most needed of the three, so the least needed gives way (and is reported as left out).
    from captioner.cues import build_cues
    from captioner.style import Style

    events = [
        event("e1", "hiccup", 20_600, 24_500, 0.68),
        event("e2", "cough", 20_600, 28_300, 0.76),
        event("e3", "clock", 20_700, 28_300, 0.92),
        event("e4", "thud", 20_800, 21_300, 0.50),  # less needed than both: stays out
    ]
    settings = Selection(generic_redundancy=False, sibling_redundancy=False, max_cues_per_minute=0)
    kept = select_events(events, (), settings).kept
    cues, dropped = build_cues(kept, Style(), 60_000)
    assert cues[0].lines == ("[clock]", "[cough]") or cues[0].lines == ("[cough]", "[clock]")
    assert cues[0].start_ms == 20_600 and set(cues[0].event_ids) == {"e2", "e3"}
    assert sorted(d.event_id for d in dropped) == ["e1", "e4"]
    assert all(d.rule == "layout" and not d.kept for d in dropped)
