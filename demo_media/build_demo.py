"""Rebuild the bundled demo video (demo.mp4) and its reference files from scratch.

The demo is a short invented scene: two flatmates talk over breakfast while the
flat around them makes noise (doorbell, dog, music, telephone, breaking
glass, smoke alarm, a passing siren). It exists so that captioner has
something realistic to caption and so its output can be compared with the
known event times.

Requirements
  Debian packages: espeak-ng (the two voices), fonts-dejavu-core (the title
  text in the picture; without a font the picture is left plain).
  Python: numpy, scipy, imageio-ffmpeg (its bundled ffmpeg writes the video).

Every non-speech sound is synthesised here with numpy/scipy, so the demo has
no third-party recordings in it (see SOURCES.md). Randomness is seeded, so the
same inputs give the same output.

Outputs, next to this script:
  demo.mp4            320x180, 12 fps, H.264 + AAC mono 22.05 kHz
  truth.csv           file,onset,offset,concept for every non-speech event
  dialogue.csv        file,onset,offset,text for every spoken line
  demo.dialogue.vtt   WebVTT track of the spoken lines

Usage:  python build_demo.py
"""

import csv
import subprocess
import tempfile
from pathlib import Path

import imageio_ffmpeg
import numpy as np
from scipy import signal
from scipy.io import wavfile

SR = 22050            # mixing and output sample rate
SEED = 2024           # one seed for the whole build: reproducible output
OUT_DIR = Path(__file__).resolve().parent
NAME = "demo"

# Two clearly different synthetic speakers.
VOICE_A = ("en-gb+m3", 165, 45)   # espeak-ng voice, words per minute, pitch
VOICE_B = ("en-us+f2", 170, 60)

SPEECH_DBFS = -20.0    # dialogue loudness (RMS over voiced parts)
ROOM_TONE_DBFS = -50.0  # light background noise so silence is not digital zero


# ---------------------------------------------------------------- helpers

def seconds(d):
    """Time axis of d seconds at SR."""
    return np.arange(int(round(d * SR))) / SR


def active_rms(x, floor_db=-30.0):
    """RMS over the part of x that is within floor_db of its peak.

    Measuring only the audible part keeps short, sparse sounds (barks, beeps)
    from being boosted just because they contain gaps.
    """
    frame = int(0.02 * SR)
    n = len(x) // frame
    if n == 0:
        return float(np.sqrt(np.mean(x ** 2)) + 1e-12)
    fr = x[: n * frame].reshape(n, frame)
    e = np.sqrt(np.mean(fr ** 2, axis=1))
    keep = e >= e.max() * 10 ** (floor_db / 20)
    return float(np.sqrt(np.mean(fr[keep] ** 2)) + 1e-12)


def at_level(x, dbfs):
    """Scale x so that its active RMS is dbfs."""
    return x * (10 ** (dbfs / 20) / active_rms(x))


def audible_span(x, floor_db=-40.0):
    """(first, last) sample index that is within floor_db of the peak."""
    idx = np.flatnonzero(np.abs(x) >= np.abs(x).max() * 10 ** (floor_db / 20))
    return int(idx[0]), int(idx[-1])


def fade(x, fade_in=0.005, fade_out=0.005):
    """Short linear fades so nothing starts or stops with a click."""
    t = seconds(len(x) / SR)
    d = len(x) / SR
    return x * np.clip(np.minimum(t / fade_in, (d - t) / fade_out), 0, 1)


def room_reverb(x, rng, rt60=0.5, wet=0.4):
    """Cheap room reverb: convolve with exponentially decaying noise.

    Dry synthetic sounds are unlike the room recordings the classifier was
    trained on; a little reverb makes barks and breaking glass read as real.
    """
    n = int(rt60 * SR)
    t = np.arange(n) / SR
    ir = rng.normal(0, 1, n) * np.exp(-6.9 * t / rt60)
    ir[0] = 0.0
    b, a = signal.butter(1, 3000 / (SR / 2))      # walls absorb the highs
    ir = signal.lfilter(b, a, ir)
    dry = np.concatenate([x, np.zeros(n)])
    tail = signal.fftconvolve(x, ir)[: len(dry)]
    tail = np.pad(tail, (0, len(dry) - len(tail)))
    return dry + wet * tail * np.abs(dry).max() / np.abs(tail).max()


def overlay(track, clip, start):
    """Add clip into track at sample start (clipped to the track's end)."""
    end = min(len(track), start + len(clip))
    track[start:end] += clip[: end - start]


def struck(f, dur, partials, t0=0.003):
    """A struck resonator: decaying sine partials (ratio, amp, decay s)."""
    t = seconds(dur)
    y = sum(a * np.sin(2 * np.pi * f * r * t) * np.exp(-t / dk) for r, a, dk in partials)
    return y * np.minimum(1, t / t0)


# ---------------------------------------------------------------- sounds

# Free-bar partial ratios (1, 2.76, 5.40, 8.93) make the tone metallic like a
# chime bar rather than musical; this is what makes it read as a doorbell.
CHIME_BAR = ((1.0, 1.0, 1.0), (2.76, 0.4, 0.5), (5.40, 0.2, 0.3), (8.93, 0.1, 0.2))


def doorbell(rng):
    """Two-tone "ding-dong" chime (A5 then F5)."""
    ding = struck(880.0, 1.8, CHIME_BAR)
    dong = struck(698.5, 2.4, CHIME_BAR)
    y = np.zeros(int(2.8 * SR))
    overlay(y, ding, 0)
    overlay(y, dong, int(0.6 * SR))
    return fade(y, fade_out=0.3)


def one_bark(rng, f0=950.0, dur=0.18):
    """A single bark: noisy harmonic burst with a rise-fall pitch, shaped by
    narrow formants."""
    t = seconds(dur)
    x = t / dur
    pitch = f0 * (1 + 0.6 * np.sin(np.pi * np.minimum(1, 1.5 * x))) * (1 - 0.4 * x)
    pitch *= 1 + 0.03 * rng.normal(0, 1, len(t))        # rough, not a clean tone
    phase = 2 * np.pi * np.cumsum(pitch) / SR
    src = sum(np.sin(k * phase + rng.uniform(0, 6)) / k ** 0.7 for k in range(1, 20))
    src = src / np.abs(src).max() + 0.4 * rng.normal(0, 0.3, len(t))
    y = np.zeros(len(t))
    for fc, gain in zip((600, 1200, 2500, 3500), (1.0, 0.8, 0.5, 0.3)):
        b, a = signal.iirpeak(fc / (SR / 2), 1 / 0.15)
        y += gain * signal.lfilter(b, a, src)
    env = np.minimum(1, t / 0.008) * np.exp(-np.maximum(0, t - 0.04) / (dur / 4))
    return y * env


def dog_barks(rng):
    """Two pairs of barks, as a dog reacting to the doorbell."""
    y = np.zeros(int(2.0 * SR))
    for onset in (0.0, 0.3, 1.0, 1.3, 1.6):
        overlay(y, one_bark(rng, 950.0 * rng.uniform(0.95, 1.05)), int(onset * SR))
    return room_reverb(y, rng, rt60=0.9, wet=0.4)


def music(rng, dur=7.5):
    """A soft, cheerful keyboard tune (I-vi-IV-V in C) as if from next door."""
    y = np.zeros(int(dur * SR))
    beat = 0.5
    chords = [(261.6, 329.6, 392.0), (220.0, 261.6, 329.6),
              (174.6, 220.0, 261.6), (196.0, 246.9, 293.7)]
    tune = [523, 587, 659, 587, 523, 440, 392, 440, 349, 392, 440, 523, 494, 440, 392, 494]
    soft = ((1, 1.0, 0.5), (2, 0.4, 0.3), (3, 0.2, 0.2))
    bright = ((1, 1.0, 0.4), (2, 0.3, 0.3), (3, 0.15, 0.2), (4, 0.1, 0.15))
    bars = int(dur / (2 * beat))
    for i in range(bars):
        chord = chords[i % len(chords)]
        for f in chord + (chord[0] / 2,):                  # add a bass note
            overlay(y, 0.4 * struck(f, 2.4 * beat, soft), int(i * 2 * beat * SR))
    for i in range(int(dur / beat)):
        overlay(y, struck(tune[i % len(tune)], 1.5 * beat, bright), int(i * beat * SR))
    return fade(y, 0.3, 1.0)


def telephone(rng):
    """Old-style bell telephone: a hammer alternating between two bells
    25 times a second, in a double-ring cadence (ring-ring, pause)."""
    def ring(dur):
        t = seconds(dur)
        y = np.zeros(len(t))
        for k, onset in enumerate(np.arange(0, dur, 1 / 25)):
            bell = struck(1600.0 if k % 2 == 0 else 2000.0, dur - onset,
                          ((1, 1.0, 0.15), (2.76, 0.5, 0.08), (5.4, 0.25, 0.04)))
            overlay(y, bell, int(onset * SR))
        return fade(y, 0.01, 0.01)

    parts = []
    for _ in range(2):
        parts += [ring(0.4), np.zeros(int(0.2 * SR)), ring(0.4), np.zeros(int(1.2 * SR))]
    return room_reverb(np.concatenate(parts[:-1]), rng, rt60=0.3, wet=0.2)


def glass_break(rng):
    """Breaking glass: an impact crack, then many short high 'tinkles' of
    falling shards whose density and loudness die away."""
    dur = 1.8
    t = seconds(dur)
    shards = np.zeros(len(t))
    for _ in range(40):
        onset = rng.exponential(0.2)
        start = int(onset * SR)
        if start >= len(t):
            continue
        tt = t[: len(t) - start]
        ring = np.sin(2 * np.pi * rng.uniform(1500, 7500) * tt) * np.exp(-tt / rng.uniform(0.02, 0.3))
        shards[start:] += rng.uniform(0.2, 1.0) * ring * np.exp(-onset / 0.5)
    hiss = signal.lfilter(*signal.butter(2, 1000 / (SR / 2), "high"), rng.normal(0, 1, len(t)))
    crack = hiss * np.exp(-t / 0.03)
    grains = (rng.random(len(t)) < 0.004) * rng.normal(0, 1, len(t)) * np.exp(-t / 0.4)
    grains = signal.lfilter(*signal.butter(2, 2000 / (SR / 2), "high"), grains)
    y = shards / np.abs(shards).max() + crack / np.abs(crack).max() + grains / np.abs(grains).max()
    return room_reverb(y, rng, rt60=0.4, wet=0.3)


def smoke_alarm(rng):
    """Smoke alarm: 3.15 kHz beeps in the standard three-beep pattern,
    repeated twice."""
    t = seconds(0.5)
    beep = fade(np.sin(2 * np.pi * 3150 * t) + 0.5 * signal.square(2 * np.pi * 3150 * t))
    gap = np.zeros(int(0.5 * SR))
    cycle = [beep, gap, beep, gap, beep, np.zeros(int(1.0 * SR))]
    return np.concatenate(cycle + cycle[:-1])


def siren(rng, dur=4.5):
    """Wailing emergency siren passing outside: slow pitch sweep, fading in and out."""
    t = seconds(dur)
    freq = 900 + 400 * np.sin(2 * np.pi * t / 2.0)
    phase = 2 * np.pi * np.cumsum(freq) / SR
    y = sum(np.sin(k * phase) / k for k in range(1, 6))
    return fade(y, 1.0, 1.5)


# ---------------------------------------------------------------- speech

def speak(text, voice):
    """Render one line with espeak-ng and return it at SR."""
    name, wpm, pitch = voice
    with tempfile.TemporaryDirectory() as tmp:
        wav = Path(tmp) / "line.wav"
        subprocess.run(["espeak-ng", "-v", name, "-s", str(wpm), "-p", str(pitch),
                        "-w", str(wav), text], check=True)
        rate, data = wavfile.read(wav)
    y = data.astype(np.float64) / 32768.0
    if rate != SR:
        y = signal.resample_poly(y, SR, rate)
    first, last = audible_span(y)
    return y[first: last + 1]        # trim espeak's leading/trailing silence


# ---------------------------------------------------------------- scene

class Scene:
    """Collects dialogue lines and sound events on one timeline."""

    def __init__(self, seconds_total):
        self.track = np.zeros(int(seconds_total * SR))
        self.lines = []     # (onset, offset, text)
        self.events = []    # (onset, offset, concept)

    def say(self, at, voice, text):
        """Place a spoken line at time at; return the time it ends."""
        y = at_level(speak(text, voice), SPEECH_DBFS)
        overlay(self.track, y, int(at * SR))
        end = at + len(y) / SR
        self.lines.append((at, end, text))
        return end

    def sound(self, at, concept, clip, dbfs):
        """Place a sound event at time at; return the time it ends.

        The ground truth covers only the audible part (within 40 dB of the
        clip's peak), not padding or the faintest reverb tail.
        """
        y = at_level(clip, dbfs)
        overlay(self.track, y, int(at * SR))
        first, last = audible_span(y)
        self.events.append((at + first / SR, at + last / SR, concept))
        return at + last / SR

    def finish(self, rng, length):
        """Cut to length, add room tone, and keep clear of clipping."""
        y = self.track[: int(length * SR)]
        b, a = signal.butter(2, 400 / (SR / 2))      # rooms hum low, not hiss
        tone = signal.lfilter(b, a, rng.normal(0, 1, len(y)))
        y = y + tone * (10 ** (ROOM_TONE_DBFS / 20) / np.sqrt(np.mean(tone ** 2)))
        peak = np.abs(y).max()
        return y * (0.89 / peak) if peak > 0.89 else y


def compose(rng):
    """The scenario. Times advance with a cursor so gaps stay explicit;
    overlapping sounds are placed without moving the cursor."""
    A, B = VOICE_A, VOICE_B
    s = Scene(60.0)
    t = 1.0
    t = s.say(t, A, "Morning. The coffee is nearly ready.") + 0.7
    t = s.sound(t, "doorbell", doorbell(rng), -22) + 0.4
    t = s.sound(t, "dog", dog_barks(rng), -21) + 0.7
    t = s.say(t, B, "That will be my parcel. I will get it.") + 0.8
    # Music from next door: starts in the clear, then plays softly under the talk.
    bed = s.sound(t, "music", music(rng), -27)
    t = s.say(t + 2.5, A, "Next door has their music on again.") + 0.5
    t = s.say(t, B, "At least it is a cheerful tune.")
    t = max(t, bed) + 0.8
    t = s.sound(t, "telephone", telephone(rng), -22) + 0.6
    t = s.say(t, B, "Let it ring. I will call back later.") + 0.6
    t = s.sound(t, "glass", glass_break(rng), -19) + 0.6
    t = s.say(t, A, "Sorry, that was the blue glass.") + 0.8
    # The alarm goes on beeping while they talk over it.
    alarm = s.sound(t, "smoke_alarm", smoke_alarm(rng), -22)
    t = s.say(t + 2.7, B, "The toast! Open the window!") + 0.6
    t = max(t, alarm) + 0.6
    # A siren passes in the street and carries on under the last line.
    end = s.sound(t, "siren", siren(rng), -24)
    t = s.say(t + 1.8, A, "Not for us, I hope.")
    return s, max(t, end) + 0.7


# ---------------------------------------------------------------- outputs

def write_csv(path, header, rows):
    with open(path, "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(header)
        for onset, offset, label in rows:
            w.writerow([NAME, f"{onset:.3f}", f"{offset:.3f}", label])


def vtt_time(sec):
    ms = int(round(sec * 1000))
    h, ms = divmod(ms, 3_600_000)
    m, ms = divmod(ms, 60_000)
    s, ms = divmod(ms, 1000)
    return f"{h:02d}:{m:02d}:{s:02d}.{ms:03d}"


def write_vtt(path, lines):
    out = ["WEBVTT", ""]
    for onset, offset, text in lines:
        out += [f"{vtt_time(onset)} --> {vtt_time(offset)}", text, ""]
    path.write_text("\n".join(out), encoding="utf-8")


def write_video(path, audio, duration):
    """Encode a plain title card plus the audio. The running clock helps when
    checking captions by eye."""
    ffmpeg = imageio_ffmpeg.get_ffmpeg_exe()
    pcm = (np.clip(audio, -1, 1) * 32767).astype(np.int16)
    with tempfile.TemporaryDirectory() as tmp:
        wav = Path(tmp) / "mix.wav"
        wavfile.write(wav, SR, pcm)
        text = ("drawtext=text='captioner demo':fontcolor=white:fontsize=22:x=(w-tw)/2:y=60,"
                "drawtext=text='%{pts\\:hms}':fontcolor=0xB0C4DE:fontsize=16:x=(w-tw)/2:y=110")
        base = [ffmpeg, "-v", "error", "-y",
                "-f", "lavfi", "-i", f"color=c=0x1E2A3A:s=320x180:r=12:d={duration:.3f}",
                "-i", str(wav)]
        tail = ["-c:v", "libx264", "-preset", "veryslow", "-crf", "30", "-pix_fmt", "yuv420p",
                "-c:a", "aac", "-b:a", "64k", "-ac", "1", "-ar", str(SR),
                "-shortest", "-movflags", "+faststart", str(path)]
        try:
            subprocess.run(base + ["-vf", text] + tail, check=True)
        except subprocess.CalledProcessError:
            # No usable font: keep the plain coloured picture.
            subprocess.run(base + tail, check=True)


def main():
    rng = np.random.default_rng(SEED)
    scene, length = compose(rng)
    audio = scene.finish(rng, length)
    write_video(OUT_DIR / f"{NAME}.mp4", audio, length)
    write_csv(OUT_DIR / "truth.csv", ["file", "onset", "offset", "concept"], scene.events)
    write_csv(OUT_DIR / "dialogue.csv", ["file", "onset", "offset", "text"], scene.lines)
    write_vtt(OUT_DIR / f"{NAME}.dialogue.vtt", scene.lines)
    print(f"{NAME}.mp4: {length:.1f} s, {len(scene.events)} events, {len(scene.lines)} lines")


if __name__ == "__main__":
    main()
