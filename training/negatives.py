"""Negative examples made here: synthetic speech (espeak-ng), room tone and test tones."""

from __future__ import annotations

import subprocess
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from training.audio import RATE, decode_file

# Sentences written for this corpus: everyday talk of an invented household and office.
SENTENCES = [
    "Could you pass me the blue folder on the second shelf?",
    "The train to the coast leaves at a quarter past nine.",
    "I think we should paint the kitchen a lighter colour this spring.",
    "Nobody told me the meeting had moved to Thursday afternoon.",
    "Let me read the last paragraph again, slowly this time.",
    "The garden needs water before the sun gets too strong.",
    "We counted forty seven boxes in the storage room yesterday.",
    "Please remember to lock the side gate when you leave.",
    "My cousin is learning to play the cello in the evenings.",
    "The report is finished, but the charts still need labels.",
    "If the bus is late again, I will take my bicycle.",
    "Seven small boats were waiting at the harbour entrance.",
    "Honestly, the soup tasted better the second day.",
    "Turn left after the bakery and keep going until the bridge.",
    "The library closes early on public holidays.",
    "She wrote the numbers on a napkin and forgot them there.",
    "Our neighbours are moving to a village in the hills.",
    "Can you hear me at the back of the room?",
    "The printer on the third floor is out of paper again.",
    "I will call you back as soon as the results arrive.",
    "This recipe needs two eggs, a cup of flour and some patience.",
    "The museum has a new room full of old maps.",
    "We should leave now if we want to find a parking space.",
    "He spent the whole weekend fixing the kitchen drawer.",
    "Thank you all for coming, and please help yourselves to tea.",
    "The forecast says it will be clear and cold tomorrow.",
    "Which of these two jackets do you like better?",
    "The children built a tall tower out of wooden blocks.",
    "Our flight was delayed by almost three hours.",
    "I found your glasses under the newspaper on the sofa.",
    "The first chapter is slow, but the story gets better.",
    "Write your name at the top of every page, please.",
    "The shop on the corner sells the best bread in town.",
    "Let us start with a short summary of last week.",
    "It took us an hour to climb to the top of the hill.",
    "I am not sure the ladder is long enough for the roof.",
    "The orchestra rehearses in the old school hall on Mondays.",
    "Do not forget to water the plants while I am away.",
    "We can talk about the budget after lunch.",
    "The new road will open at the end of the summer.",
    "Nous allons au marché demain matin avec les enfants.",
    "Das Wetter soll am Wochenende endlich besser werden.",
    "Mañana tenemos que terminar el informe antes de las diez.",
    "Questa sera ceniamo tutti insieme a casa della nonna.",
    "Amanhã vamos visitar o museu da cidade.",
    "Morgen gaan we met de fiets naar het strand.",
    "Vi ses på stationen klockan åtta i morgon.",
    "Jutro rano jedziemy pociągiem do Krakowa.",
]
VOICES = {
    "en": ["en", "en-us", "en-gb-scotland", "en-gb-x-rp", "en-029", "en-gb-x-gbclan"],
    "other": ["fr", "de", "es", "it", "pt", "nl", "sv", "pl"],
}
LANGUAGE_OF = {40: "fr", 41: "de", 42: "es", 43: "it", 44: "pt", 45: "nl", 46: "sv", 47: "pl"}


@dataclass(frozen=True)
class Made:
    name: str
    params: str
    samples: np.ndarray  # int16 at RATE


def speech(count: int, seed: int) -> list[Made]:
    """espeak-ng sentences in many voices, speeds and pitches (variants +m1..+f4 included)."""
    rng = np.random.default_rng(seed)
    made = []
    for n in range(count):
        index = int(rng.integers(len(SENTENCES)))
        base = LANGUAGE_OF.get(index) or str(rng.choice(VOICES["en"]))
        variant = str(rng.choice(["", "+m1", "+m3", "+m5", "+f1", "+f2", "+f4", "+croak", "+whisper"]))
        speed, pitch = int(rng.integers(120, 200)), int(rng.integers(20, 80))
        voice = base + variant
        with tempfile.TemporaryDirectory() as folder:
            out = Path(folder) / "s.wav"
            command = [
                "espeak-ng",
                "-v",
                voice,
                "-s",
                str(speed),
                "-p",
                str(pitch),
                "-w",
                str(out),
                SENTENCES[index],
            ]
            if subprocess.run(command, capture_output=True, check=False).returncode != 0 or not out.exists():
                continue
            samples = decode_file(out)
        made.append(
            Made(f"espeak_{n}", f"espeak-ng -v {voice} -s {speed} -p {pitch}: sentence {index}", samples)
        )
    return made


def room_tone(count: int, seed: int) -> list[Made]:
    """Noise of several colours, mains hum and its harmonics, and low ventilation rumble."""
    rng = np.random.default_rng(seed)
    made = []
    for n in range(count):
        seconds = rng.uniform(4, 10)
        length = int(seconds * RATE)
        colour = str(rng.choice(["white", "pink", "brown", "hum", "hum+pink", "fan"]))
        white = rng.standard_normal(length)
        spectrum = np.fft.rfft(white)
        freqs = np.fft.rfftfreq(length, 1 / RATE)
        freqs[0] = freqs[1]
        if colour in ("pink", "hum+pink"):
            spectrum = spectrum / np.sqrt(freqs)
        elif colour == "brown":
            spectrum = spectrum / freqs
        elif colour == "fan":
            spectrum = spectrum / (1 + (freqs / rng.uniform(150, 500)) ** 2)
        noise = np.fft.irfft(spectrum, length) if colour != "hum" else np.zeros(length)
        noise /= np.max(np.abs(noise)) + 1e-9
        params = colour
        if colour.startswith("hum"):
            mains = float(rng.choice([50.0, 60.0]))
            t = np.arange(length) / RATE
            hum = sum(
                rng.uniform(0.1, 1.0) / k * np.sin(2 * np.pi * mains * k * t + rng.uniform(0, 6.3))
                for k in range(1, 6)
            )
            noise = 0.3 * noise + hum / np.max(np.abs(hum))
            params += f" {mains:.0f} Hz"
        level = rng.uniform(-50, -25)
        samples = np.round(noise / (np.max(np.abs(noise)) + 1e-9) * 10 ** (level / 20) * 32767).astype(
            np.int16
        )
        made.append(Made(f"room_{n}", f"{params}, peak {level:.0f} dBFS, {seconds:.1f} s", samples))
    return made


def tones(count: int, seed: int) -> list[Made]:
    """Test tones, bleeps and plain electronic beeps (sine, square, triangle; steady or swept),
    one to four in each clip, over near-silence or faint room noise: sounds a video carries
    that no head's concept is, and that a head never shown one may take for anything."""
    rng = np.random.default_rng(seed)
    made = []
    for n in range(count):
        length = int(rng.uniform(3, 8) * RATE)
        bed = rng.standard_normal(length) * 10 ** (rng.uniform(-90, -55) / 20)
        described = []
        for _ in range(int(rng.integers(1, 5))):
            seconds = float(rng.uniform(0.1, 3.0))
            size = min(int(seconds * RATE), length - 1)
            start = int(rng.integers(0, length - size))
            low = float(np.exp(rng.uniform(np.log(200), np.log(4000))))
            high = low * float(rng.choice([1.0, 1.0, rng.uniform(0.5, 2.0)]))  # a third are sweeps
            phase = 2 * np.pi * np.cumsum(np.linspace(low, high, size)) / RATE
            shape = str(rng.choice(["sine", "square", "triangle"]))
            wave = {
                "sine": np.sin(phase),
                "square": np.sign(np.sin(phase)),
                "triangle": 2 / np.pi * np.arcsin(np.sin(phase)),
            }[shape]
            fade = min(size // 2, int(rng.choice([0, 80, 400])))  # none (a click), 5 ms or 25 ms
            if fade:
                ramp = np.linspace(0, 1, fade)
                wave[:fade] *= ramp
                wave[size - fade :] *= ramp[::-1]
            level = rng.uniform(-30, -3)
            bed[start : start + size] += wave * 10 ** (level / 20)
            described.append(f"{shape} {low:.0f}-{high:.0f} Hz {seconds:.1f} s at {level:.0f} dBFS")
        samples = np.round(np.clip(bed, -1, 1) * 32767).astype(np.int16)
        made.append(Made(f"tone_{n}", "; ".join(described), samples))
    return made
