"""Synthesized training sounds follow the conventions they are named after."""

from __future__ import annotations

import numpy as np

from training.audio import RATE
from training.synthesize import GENERATORS, smoke_alarm, synthesize, telephone_na


def _on_spans(signal: np.ndarray, frame: int = 80) -> list[tuple[float, float]]:
    """Spans (s) where the 5 ms frame energy is above a tenth of its maximum."""
    frames = signal[: len(signal) // frame * frame].reshape(-1, frame)
    energy = (frames**2).mean(axis=1)
    on = energy > energy.max() * 0.1
    edges = np.flatnonzero(np.diff(np.concatenate([[0], on.astype(int), [0]])))
    return [(a * frame / RATE, b * frame / RATE) for a, b in zip(edges[::2], edges[1::2])]


def test_smoke_alarm_follows_the_t3_pattern() -> None:
    # ISO 8201 temporal-three pattern: three 0.5 s signals with 0.5 s gaps, then 1.5 s off.
    for seed in range(5):
        signal, _ = smoke_alarm(np.random.default_rng(seed))
        spans = _on_spans(signal)
        assert len(spans) % 3 == 0 and spans
        for on, off in spans:
            assert abs((off - on) - 0.5) < 0.02
        starts = [on for on, _ in spans]
        gaps = np.diff(starts)
        expected = [1.0, 1.0, 2.0] * (len(spans) // 3)
        assert np.allclose(gaps, expected[: len(gaps)], atol=0.02)


def test_north_american_ring_is_two_seconds_on_four_off() -> None:
    # North American ringing cadence 2 s on, 4 s off (from memory).
    for seed in range(5):
        signal, _ = telephone_na(np.random.default_rng(seed))
        # 50 ms frames: the two tones beat at 40 Hz, so shorter frames would see gaps in the ring
        spans = [(a, b) for a, b in _on_spans(signal, 800) if 0.1 < a and b < len(signal) / RATE - 0.1]
        assert spans
        for on, off in spans:
            assert abs((off - on) - 2.0) < 0.06
        spectrum = np.abs(np.fft.rfft(signal))
        freqs = np.fft.rfftfreq(len(signal), 1 / RATE)
        peaks = sorted(freqs[np.argsort(spectrum)[-2:]])
        assert 425 < peaks[0] < 455 and 465 < peaks[1] < 500


def test_synthesized_set_is_reproducible_and_covers_every_generator() -> None:
    first, second = synthesize(4, seed=3), synthesize(4, seed=3)
    assert [c.params for c in first] == [c.params for c in second]
    assert np.array_equal(first[5].samples, second[5].samples)
    assert {c.generator for c in first} == set(GENERATORS)
    assert all(2.0 <= len(c.samples) / RATE <= 8.6 for c in first)
