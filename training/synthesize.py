"""Synthesized alert and household sounds, for concepts with few real recordings.

Each generator follows a published or widely used convention and randomizes everything the
convention leaves open (pitch, timbre, level envelope, room). Values marked "(from memory)"
were not checked against the cited document while writing this.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy.signal import fftconvolve

from training.audio import RATE

Generator = Callable[[np.random.Generator], tuple[np.ndarray, str]]


@dataclass(frozen=True)
class Synthesized:
    concept: str
    generator: str
    params: str  # the drawn parameters, as recorded in the clip list
    samples: np.ndarray  # float, peak 1


def _t(seconds: float) -> np.ndarray:
    return np.arange(int(seconds * RATE)) / RATE


def _room(signal: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """A short exponentially decaying noise reverb (RT60 0.2-0.8 s) and a little noise floor."""
    rt60 = rng.uniform(0.2, 0.8)
    tail = _t(rt60)
    impulse = rng.standard_normal(len(tail)) * np.exp(-6.9 * tail / rt60)
    impulse[0] = 1.0 / rng.uniform(0.05, 0.3)
    wet = fftconvolve(signal, impulse)[: len(signal)]
    out = wet / (np.max(np.abs(wet)) + 1e-9)
    noisy: np.ndarray = out + rng.standard_normal(len(out)) * 10 ** (rng.uniform(-60, -40) / 20)
    return noisy


def _gate(times: np.ndarray, spans: list[tuple[float, float]], ramp: float = 0.005) -> np.ndarray:
    """1 inside the (on, off) spans, 0 outside, with short linear ramps against clicks."""
    gate = np.zeros_like(times)
    for on, off in spans:
        rise = np.clip((times - on) / ramp, 0, 1)
        fall = np.clip((off - times) / ramp, 0, 1)
        gate = np.maximum(gate, np.minimum(rise, fall))
    return gate


def _cadence(pattern: list[float], total: float, start: float = 0.0) -> list[tuple[float, float]]:
    """Repeat an on/off pattern [on, off, on, off, ...] over `total` seconds."""
    spans, at = [], start
    while at < total:
        for n in range(0, len(pattern), 2):
            spans.append((at, at + pattern[n]))
            at += pattern[n] + pattern[n + 1]
    return [(a, min(b, total)) for a, b in spans if a < total]


def _two_tone_ring(
    rng: np.random.Generator,
    tones: tuple[float, float],
    pattern: list[float],
    durations: tuple[float, float, float],
) -> tuple[np.ndarray, str]:
    """Two summed tones switched by a ring cadence; durations = shortest clip, earliest, latest start."""
    shortest, earliest, latest = durations
    total = rng.uniform(shortest, 8)
    t = _t(total)
    gate = _gate(t, _cadence(pattern, total, rng.uniform(earliest, latest)), 0.01)
    shift = rng.uniform(0.98, 1.02)
    tone = np.sin(2 * np.pi * tones[0] * shift * t) + np.sin(2 * np.pi * tones[1] * shift * t)
    cadence = "2 s on 4 s off" if pattern == [2.0, 4.0] else "/".join(f"{x:.1f}" for x in pattern) + " s"
    return tone * gate, f"{tones[0]:.0f}+{tones[1]:.0f} Hz x{shift:.3f}, {cadence}, {total:.1f} s"


def telephone_na(rng: np.random.Generator) -> tuple[np.ndarray, str]:
    # North American ringing: 2 s on, 4 s off (from memory; the 440+480 Hz pair is the
    # ringback tone of the same cadence, ANSI T1.401).
    return _two_tone_ring(rng, (440, 480), [2.0, 4.0], (4, 0.05, 0.5))


def telephone_uk(rng: np.random.Generator) -> tuple[np.ndarray, str]:
    # UK double ring: 0.4 s on, 0.2 s off, 0.4 s on, 2 s off, 400+450 Hz (from memory).
    return _two_tone_ring(rng, (400, 450), [0.4, 0.2, 0.4, 2.0], (3, 0.0, 0.5))


def telephone_trill(rng: np.random.Generator) -> tuple[np.ndarray, str]:
    # Electronic ringer: two tones about 0.9-1.5 kHz switched at 16-22 Hz, in the North
    # American or UK cadence (ranges from memory).
    total = rng.uniform(4, 8)
    t = _t(total)
    low = rng.uniform(900, 1200)
    high = low * rng.uniform(1.15, 1.35)
    rate = rng.uniform(16, 22)
    which = np.sin(2 * np.pi * rate * t) > 0
    freq = np.where(which, high, low)
    tone = np.sign(np.sin(2 * np.pi * np.cumsum(freq) / RATE)) * 0.5 + np.sin(
        2 * np.pi * np.cumsum(freq) / RATE
    )
    uk = rng.random() < 0.5
    pattern = [0.4, 0.2, 0.4, 2.0] if uk else [2.0, 4.0]
    gate = _gate(t, _cadence(pattern, total, rng.uniform(0, 0.5)), 0.003)
    return tone * gate, f"trill {low:.0f}/{high:.0f} Hz at {rate:.1f} Hz, {'UK' if uk else 'NA'} cadence"


def _bell_note(t: np.ndarray, f0: float, decay: float, rng: np.random.Generator) -> np.ndarray:
    # Struck bar partials 1 : 2.756 : 5.404 (free-free bar modes, textbook values).
    out = np.zeros_like(t)
    for ratio, gain in ((1.0, 1.0), (2.756, rng.uniform(0.2, 0.5)), (5.404, rng.uniform(0.05, 0.2))):
        out += gain * np.sin(2 * np.pi * f0 * ratio * t) * np.exp(-t * ratio / decay)
    return out


def doorbell(rng: np.random.Generator) -> tuple[np.ndarray, str]:
    # Ding-dong chime: two struck notes a major third apart, high then low (convention).
    total = rng.uniform(2.5, 6)
    t = _t(total)
    high = rng.uniform(600, 900)
    low = high / 2 ** (4 / 12)
    decay = rng.uniform(0.6, 1.5)
    gap = rng.uniform(0.4, 0.8)
    out = np.zeros_like(t)
    presses = 1 if rng.random() < 0.7 else 2
    at = rng.uniform(0.05, 0.3)
    for _ in range(presses):
        for f0, delay in ((high, 0.0), (low, gap)):
            start = int((at + delay) * RATE)
            if start < len(t):
                out[start:] += _bell_note(t[: len(t) - start], f0, decay, rng)
        at += gap + rng.uniform(1.2, 2.0)
    return out, f"ding {high:.0f} Hz dong {low:.0f} Hz, gap {gap:.2f} s, {presses} press(es)"


def smoke_alarm(rng: np.random.Generator) -> tuple[np.ndarray, str]:
    # Temporal-three (T3) pattern of ISO 8201 / NFPA 72: three 0.5 s beeps with 0.5 s gaps,
    # then 1.5 s off; piezo tone near 3 kHz (tone from memory), harsh: odd harmonics.
    cycles = int(rng.integers(1, 3))
    start = rng.uniform(0.05, 0.4)
    total = start + cycles * 4.0 + rng.uniform(0, 0.1)
    t = _t(total)
    f0 = rng.uniform(2900, 3400)
    tone = np.sign(np.sin(2 * np.pi * f0 * t)) * 0.6 + np.sin(2 * np.pi * f0 * t)
    spans = [
        (start + c * 4.0 + b * 1.0, start + c * 4.0 + b * 1.0 + 0.5) for c in range(cycles) for b in range(3)
    ]
    return tone * _gate(t, spans, 0.002), f"T3 {cycles} cycle(s), {f0:.0f} Hz, start {start:.2f} s"


T3_BEEP_SECONDS, T3_GAP_SECONDS, T3_PAUSE_SECONDS = 0.5, 0.5, 1.5


def siren(rng: np.random.Generator) -> tuple[np.ndarray, str]:
    # Electronic siren: wail (slow sweep, 3.5-6 s per cycle), yelp (fast, 0.25-0.4 s) between
    # about 600-750 and 1300-1650 Hz, or hi-lo two tones about a fourth apart (typical ranges
    # and European two-tone practice, from memory).
    kind = str(rng.choice(["wail", "yelp", "hi-lo"]))
    total = rng.uniform(4, 8)
    t = _t(total)
    low, high = rng.uniform(600, 750), rng.uniform(1300, 1650)
    if kind == "hi-lo":
        low = rng.uniform(420, 470)
        high = low * rng.uniform(1.30, 1.36)
        period = rng.uniform(0.9, 1.5)
        freq = np.where((t % period) < period / 2, high, low)
    else:
        period = rng.uniform(3.5, 6.0) if kind == "wail" else rng.uniform(0.25, 0.4)
        phase = (t / period + rng.random()) % 1.0
        shape = np.sin(np.pi * phase) ** 2 if kind == "wail" else phase
        freq = low + (high - low) * shape
    angle = 2 * np.pi * np.cumsum(freq) / RATE
    tone = np.sin(angle) + 0.3 * np.sin(3 * angle) + 0.15 * np.sin(5 * angle)
    swell = np.clip(0.4 + 0.6 * np.sin(np.pi * t / total) if rng.random() < 0.4 else np.ones_like(t), 0, 1)
    return tone * swell, f"{kind} {low:.0f}-{high:.0f} Hz, {period:.2f} s per cycle"


def knock(rng: np.random.Generator) -> tuple[np.ndarray, str]:
    # Knuckles on a wooden door: 1-2 ms impulses exciting damped door modes from 90-150 Hz up,
    # in groups of 2-4 knocks (common practice).
    total = rng.uniform(2, 5)
    t = _t(total)
    base = rng.uniform(90, 150)
    modes = [(base * r, rng.uniform(0.01, 0.05), rng.uniform(0.3, 1.0)) for r in (1.0, 2.3, 3.9, 6.1, 8.7)]
    out = np.zeros_like(t)
    groups = int(rng.integers(1, 3))
    at = rng.uniform(0.1, 0.4)
    pattern = []
    for _ in range(groups):
        count = int(rng.integers(2, 5))
        gap = rng.uniform(0.12, 0.3)
        for _ in range(count):
            pattern.append(at)
            at += gap * rng.uniform(0.9, 1.1)
        at += rng.uniform(0.6, 1.2)
    length = int(0.25 * RATE)
    tail = t[:length]
    for onset in pattern:
        start = int(onset * RATE)
        if start + 10 >= len(t):
            break
        hit = sum(g * np.sin(2 * np.pi * f * tail) * np.exp(-tail / d) for f, d, g in modes)
        hit += rng.standard_normal(length) * np.exp(-tail / 0.003) * 0.5
        hit *= rng.uniform(0.7, 1.0)
        end = min(len(t), start + length)
        out[start:end] += hit[: end - start]
    return out, f"{len(pattern)} knocks in {groups} group(s), lowest mode {base:.0f} Hz"


def clock(rng: np.random.Generator) -> tuple[np.ndarray, str]:
    # Mechanical escapement: regular clicks at 1-2.5 beats per second, tick and tock slightly
    # different in pitch and level (common practice).
    total = rng.uniform(4, 8)
    t = _t(total)
    rate = float(rng.choice([1.0, 1.0, 2.0, 2.5]))
    click_hz = rng.uniform(1800, 3500)
    out = np.zeros_like(t)
    length = int(0.03 * RATE)
    tail = t[:length]
    at, n = rng.uniform(0, 0.5), 0
    while at < total - 0.05:
        f = click_hz * (1.0 if n % 2 == 0 else rng.uniform(0.8, 0.9))
        hit = np.sin(2 * np.pi * f * tail) * np.exp(-tail / 0.004) + rng.standard_normal(length) * np.exp(
            -tail / 0.001
        )
        start = int(at * RATE)
        end = min(len(t), start + length)
        out[start:end] += hit[: end - start] * (1.0 if n % 2 == 0 else rng.uniform(0.6, 0.9))
        at += 1.0 / rate
        n += 1
    return out, f"tick-tock {rate} beats/s, click {click_hz:.0f} Hz"


def alarm_clock(rng: np.random.Generator) -> tuple[np.ndarray, str]:
    # Digital alarm-clock beeper: bursts of 4 short beeps (60-100 ms) at 2.4-4 kHz, about one
    # burst per second (convention, from memory).
    total = rng.uniform(3, 8)
    t = _t(total)
    f0 = rng.uniform(2400, 4000)
    beep, gap = rng.uniform(0.06, 0.1), rng.uniform(0.05, 0.09)
    count = int(rng.choice([2, 4, 4]))
    period = rng.uniform(0.9, 1.2)
    spans = []
    at = rng.uniform(0.05, 0.4)
    while at < total:
        spans += [(at + k * (beep + gap), at + k * (beep + gap) + beep) for k in range(count)]
        at += period
    tone = np.sign(np.sin(2 * np.pi * f0 * t)) * 0.5 + np.sin(2 * np.pi * f0 * t)
    return tone * _gate(
        t, spans, 0.002
    ), f"{count} beeps of {beep * 1000:.0f} ms at {f0:.0f} Hz every {period:.2f} s"


def car_horn(rng: np.random.Generator) -> tuple[np.ndarray, str]:
    # Dual-tone electric horn: fundamentals about 390-430 and 480-520 Hz, rich in harmonics
    # (typical values, from memory); short, double or long honks.
    total = rng.uniform(2, 5)
    t = _t(total)
    f1, f2 = rng.uniform(390, 430), rng.uniform(480, 520)
    out = np.zeros_like(t)
    for f in (f1, f2):
        angle = 2 * np.pi * f * t
        out += sum(np.sin(k * angle) / k**0.8 for k in range(1, 12))
    honks = str(rng.choice(["short", "double", "long"]))
    start = rng.uniform(0.1, 0.4)
    if honks == "short":
        spans = [(start, start + rng.uniform(0.25, 0.5))]
    elif honks == "double":
        spans = [(start, start + 0.25), (start + 0.4, start + 0.4 + rng.uniform(0.25, 0.5))]
    else:
        spans = [(start, min(total - 0.1, start + rng.uniform(1.0, 2.5)))]
    return np.tanh(out * 0.5) * _gate(t, spans, 0.01), f"{f1:.0f}+{f2:.0f} Hz, {honks} honk"


# The Westminster quarters: the four phrases of the chime on the notes G#4 F#4 E4 B3
# (semitones above B3: 9, 7, 5, 0), as door chimes play them (from memory).
WESTMINSTER_PHRASES = ((9, 7, 5, 0), (5, 9, 7, 0), (5, 7, 9, 5), (9, 5, 7, 0), (0, 7, 9, 5))


def doorbell_westminster(rng: np.random.Generator) -> tuple[np.ndarray, str]:
    # Melodic door chime: one or two Westminster phrases of struck-bar notes (convention).
    phrases = [
        WESTMINSTER_PHRASES[int(rng.integers(len(WESTMINSTER_PHRASES)))]
        for _ in range(int(rng.integers(1, 3)))
    ]
    step = rng.uniform(0.45, 0.7)
    root = rng.uniform(220, 330)
    decay = rng.uniform(0.8, 1.8)
    notes = [n for phrase in phrases for n in phrase]
    total = 0.2 + step * len(notes) + rng.uniform(1.0, 2.0)
    t = _t(total)
    out = np.zeros_like(t)
    for k, semitones in enumerate(notes):
        start = int((0.1 + k * step + (step if k >= 4 else 0.0)) * RATE)
        if start < len(t):
            out[start:] += _bell_note(t[: len(t) - start], root * 2 ** (semitones / 12), decay, rng)
    return out, f"Westminster chime, {len(phrases)} phrase(s) on B3 = {root:.0f} Hz, {step:.2f} s per note"


def doorbell_buzzer(rng: np.random.Generator) -> tuple[np.ndarray, str]:
    # Electric door buzzer: an interrupter driven from the mains hums at twice the mains
    # frequency (100 or 120 Hz), harsh with harmonics and rattle; one to three presses (common practice).
    mains = float(rng.choice([50.0, 60.0]))
    f0 = 2 * mains * rng.uniform(0.97, 1.03)
    presses = int(rng.integers(1, 4))
    spans, at = [], rng.uniform(0.05, 0.3)
    for _ in range(presses):
        length = rng.uniform(0.3, 1.8)
        spans.append((at, at + length))
        at += length + rng.uniform(0.2, 0.8)
    total = at + rng.uniform(0.2, 0.6)
    t = _t(total)
    phase = (t * f0) % 1.0
    buzz = np.where(phase < rng.uniform(0.2, 0.5), 1.0, -0.4) + rng.standard_normal(len(t)) * 0.15
    return np.tanh(2 * buzz) * _gate(t, spans, 0.005), f"buzzer {f0:.0f} Hz, {presses} press(es)"


def telephone_bell(rng: np.random.Generator) -> tuple[np.ndarray, str]:
    # Electromechanical ringer: the ringing current (20 Hz in North America, 25 Hz in much of
    # Europe) swings a clapper between two bell gongs, so each gong is struck 20-25 times a
    # second; North American or UK cadence (values from memory).
    uk = rng.random() < 0.5
    strike_hz = 25.0 if uk else 20.0
    total = rng.uniform(4, 8)
    t = _t(total)
    gongs = (rng.uniform(900, 1300), rng.uniform(1300, 1800))
    out = np.zeros_like(t)
    length = int(0.06 * RATE)
    tail = t[:length]
    pattern = [0.4, 0.2, 0.4, 2.0] if uk else [2.0, 4.0]
    for on, off in _cadence(pattern, total, rng.uniform(0.05, 0.5)):
        at, k = on, 0
        while at < off:
            f = gongs[k % 2]
            hit = sum(g * np.sin(2 * np.pi * f * r * tail) for r, g in ((1.0, 1.0), (2.7, 0.4), (5.2, 0.15)))
            hit = hit * np.exp(-tail / 0.03)
            start = int(at * RATE)
            end = min(len(t), start + length)
            out[start:end] += hit[: end - start]
            at += 1.0 / (2 * strike_hz)
            k += 1
    return out, f"bell ringer {gongs[0]:.0f}/{gongs[1]:.0f} Hz, {'UK' if uk else 'NA'} cadence"


GENERATORS: dict[str, tuple[str, Generator]] = {
    "telephone_na": ("telephone", telephone_na),
    "telephone_uk": ("telephone", telephone_uk),
    "telephone_trill": ("telephone", telephone_trill),
    "doorbell": ("doorbell", doorbell),
    "smoke_alarm_t3": ("smoke_alarm", smoke_alarm),
    "siren": ("siren", siren),
    "knock": ("knock", knock),
    "clock": ("clock", clock),
    "alarm_clock": ("alarm_clock", alarm_clock),
    "car_horn": ("car_horn", car_horn),
    "doorbell_westminster": ("doorbell", doorbell_westminster),
    "doorbell_buzzer": ("doorbell", doorbell_buzzer),
    "telephone_bell": ("telephone", telephone_bell),
}


def synthesize(count_per_concept: int = 36, seed: int = 20_240_601) -> list[Synthesized]:
    """The same clips for the same seed: each generator draws from its own seeded stream."""
    per_generator: dict[str, int] = {}
    for concept, _ in GENERATORS.values():
        per_generator[concept] = per_generator.get(concept, 0) + 1
    clips = []
    for index, (name, (concept, generate)) in enumerate(GENERATORS.items()):
        rng = np.random.default_rng([seed, index])
        for n in range(-(-count_per_concept // per_generator[concept])):
            dry, params = generate(rng)
            wet = _room(dry, rng) if name != "smoke_alarm_t3" or n % 2 else dry / (np.max(np.abs(dry)) + 1e-9)
            clips.append(Synthesized(concept, name, f"{name} #{n}: {params}", wet))
    return clips
