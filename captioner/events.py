"""Events: per-concept score curves -> bridged, double-thresholded, timed SoundEvents."""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
from scipy.ndimage import maximum_filter1d, median_filter

from .heads import DECADES, FLOOR_DECADES
from .scores import ScoreTrack
from .style import Detection
from .vocabulary import ALERT_PRIORITY, ClassEntry, Kind, Vocabulary

_NEVER_CAPTIONED = (Kind.SPEECH, Kind.IGNORE)
# The noise floor is a low percentile of the surrounding frame levels: the pauses between
# words and sounds. The median would be the dialogue itself wherever people talk.
FLOOR_PERCENTILE = 15
_MIN_SURROUNDINGS_MS = 1000  # less than this around an event is no reference for its contrast
LASTING = (Kind.CONTINUOUS, Kind.MUSIC, Kind.AMBIENCE)


@dataclass(frozen=True, slots=True)
class SoundEvent:
    """One occurrence of a concept, in integer milliseconds."""

    event_id: str
    concept: str
    label: str  # the class that scored highest over the event (chooses the wording)
    phrase: str
    phrase_present: str
    kind: Kind
    priority: int
    parent: str | None
    start_ms: int
    end_ms: int
    peak_score: float
    mean_score: float
    level_db: float  # loudness of the event (dBFS, 90th percentile of frame levels)
    background_db: float  # loudness around it (dBFS, median of frames in a +-5 s window)
    ancestors: tuple[str, ...] = ()  # parent, grandparent, ... (for redundancy between levels)
    joined: int = 0  # later occurrences folded into this one by the selection policy
    generic: bool = False  # the concept's wording names no source (see the vocabulary)
    floor_db: float | None = (
        None  # noise floor around it (dBFS, FLOOR_PERCENTILE of the same window); None = unknown
    )
    parent_wording: (
        tuple[str, str] | tuple[()]
    ) = ()  # the parent concept's (phrase, phrase_present), for sounds too close to tell apart
    noun: str = ""  # the sound as a noun, for its end cue ("rain"); "" = derived from the phrase
    same_sound: tuple[str, ...] = ()  # concepts that name this sound in other words

    @property
    def duration_ms(self) -> int:
        return self.end_ms - self.start_ms

    @property
    def contrast_db(self) -> float:
        return self.level_db - self.background_db

    @property
    def above_floor_db(self) -> float:
        """Event level above the noise floor (above the background when the floor is unknown)."""
        return self.level_db - (self.background_db if self.floor_db is None else self.floor_db)


@dataclass(frozen=True, slots=True)
class Span:
    """A stretch of time, e.g. dialogue, in integer milliseconds."""

    start_ms: int
    end_ms: int


def overlaps(start_a: int, end_a: int, start_b: int, end_b: int) -> bool:
    """Whether two spans in ms share time; spans that only touch do not.

    >>> overlaps(0, 1000, 999, 2000), overlaps(0, 1000, 1000, 2000)
    (True, False)
    """
    return start_a < end_b and start_b < end_a


def median_patches(median_ms: int, hop_ms: int) -> int:
    """Odd median-filter length in patches for a length in ms (1 = no smoothing).

    >>> median_patches(1440, 480), median_patches(0, 480), median_patches(960, 480)
    (3, 1, 3)
    """
    count = max(1, round(median_ms / hop_ms))
    return count if count % 2 else count + 1


def hysteresis(curve: np.ndarray, onset: float, offset: float) -> list[tuple[int, int]]:
    """Runs [first, last) that stay at or above `offset` and reach `onset` somewhere.

    >>> hysteresis(np.array([0.1, 0.6, 0.4, 0.35, 0.1, 0.7, 0.4, 0.2, 0.4]), 0.5, 0.3)
    [(1, 4), (5, 7)]
    """
    above = np.concatenate([[False], curve >= offset, [False]])
    edges = np.flatnonzero(np.diff(above.astype(np.int8)))
    return [(int(a), int(b)) for a, b in zip(edges[::2], edges[1::2]) if curve[a:b].max() >= onset]


def bridge(curve: np.ndarray, patches: int) -> np.ndarray:
    """Running maximum over `patches` patches centred on each one (1 = unchanged).

    Frame scores of a weakly trained classifier flicker: an alarm or a ringing phone often
    scores high in every other patch only. The running maximum keeps such a sound one run
    (and reaches back one patch towards its true start) without ever erasing a short peak,
    which a median filter would do.

    >>> bridge(np.array([0.0, 0.8, 0.0, 0.7, 0.0, 0.0]), 3).tolist()
    [0.8, 0.8, 0.8, 0.7, 0.7, 0.0]
    """
    return maximum_filter1d(curve, size=patches, mode="nearest") if patches > 1 else curve


# A head file scores 1.0 where one held-out negative patch in 10**DECADES scores as high. Those
# negatives (other sound effects, speech, music, room tone) are harder than a soundtrack's
# dialogue and pauses: on that scale real finds of ordinary sounds often scored 0.1-0.3, under
# the style's shared thresholds, while nothing outside the development set's events passed
# 0.3. So the head of an ordinary sound is read with 1.0 at 10**ORDINARY_HEAD_DECADES instead
# (chosen on that set; tests/benchmarks/RESULTS.md, "Reading the heads"). An attention sound's
# head keeps the file's scale: its curve also takes its classes' maximum, two detectors in
# one, and read the other way the alert heads worded the demo's bell phone an alarm clock and
# the end of its door chime a siren.
ORDINARY_HEAD_DECADES = 4.0
_ORDINARY_HEAD_GAIN = (DECADES - FLOOR_DECADES) / (ORDINARY_HEAD_DECADES - FLOOR_DECADES)


def concept_curves(
    track: ScoreTrack, vocabulary: Vocabulary
) -> dict[str, tuple[np.ndarray, tuple[ClassEntry, ...]]]:
    """Concept -> (its score per patch, its classes), captioned kinds only.

    This is the one place that decides where a concept's curve comes from: its learned head
    where the track has one, else the highest of its classifier classes. For attention sounds
    (priority ALERT_PRIORITY and up: alarms, sirens, phones, doorbells, knocks) the head
    may add what the classes miss but never take away what they hear: the higher of the two
    counts, because a missed alarm costs a viewer more than one more cue to review. Other
    heads are read on the soundtrack scale (ORDINARY_HEAD_DECADES).
    """
    heads = {concept: column for column, concept in enumerate(track.head_concepts)}
    curves = {}
    for concept, entries in vocabulary.concepts().items():
        if entries[0].kind in _NEVER_CAPTIONED:
            continue
        columns = [e.index for e in entries if e.index >= 0]
        if concept in heads:
            head = track.head_scores[:, heads[concept]]
            if entries[0].priority < ALERT_PRIORITY:
                head = np.minimum(head * _ORDINARY_HEAD_GAIN, 1.0)
            elif columns:
                head = np.maximum(head, track.scores[:, columns].max(axis=1))
            curves[concept] = (head, entries)
        elif columns:
            curves[concept] = (track.scores[:, columns].max(axis=1), entries)
    return curves


def ancestry(vocabulary: Vocabulary) -> dict[str, tuple[str, ...]]:
    """Concept -> its chain of broader concepts, nearest first (e.g. dog -> pet, animal)."""
    parents = {concept: entries[0].parent for concept, entries in vocabulary.concepts().items()}
    chains = {}
    for concept in parents:
        chain: list[str] = []
        step = parents[concept]
        while step is not None and step not in chain and step != concept:
            chain.append(step)
            step = parents.get(step)
        chains[concept] = tuple(chain)
    return chains


def detect_events(track: ScoreTrack, vocabulary: Vocabulary, settings: Detection) -> list[SoundEvent]:
    """Every concept occurrence in the track, sorted by start time.

    Speech and ignored classes never become events. Lasting kinds (continuous, music,
    ambience) may be median-filtered over settings.median_ms; short sounds never are, because
    a median over a few patches erases a sound that fills one or two patches. Every curve
    is then bridged over settings.bridge_ms and double-thresholded. A lasting sound must
    be above the onset threshold for settings.lasting_min_active_ms in total: one patch of
    "telephone" or "music" is more often a tonal blip than a ring or a tune. Onsets move to
    the nearest rise in signal level when settings.onset_refine is on.
    """
    kernel = median_patches(settings.median_ms, track.hop_ms)
    span = median_patches(settings.bridge_ms, track.hop_ms)
    lineage = ancestry(vocabulary)
    by_concept = vocabulary.concepts()
    needed = max(1, -(-settings.lasting_min_active_ms // track.hop_ms))  # ceiling division
    headed = set(track.head_concepts)
    found: list[SoundEvent] = []
    for concept, (curve, entries) in concept_curves(track, vocabulary).items():
        smooth = (
            median_filter(curve, size=kernel, mode="nearest")
            if kernel > 1 and entries[0].kind in LASTING
            else curve
        )
        runs = hysteresis(bridge(smooth, span), settings.onset_threshold, settings.offset_threshold)
        if entries[0].kind in LASTING:
            runs = [
                r
                for r in runs
                if int((smooth[r[0] : r[1]] >= settings.onset_threshold).sum()) >= needed
                or smooth[r[0] : r[1]].max() >= settings.lasting_sure_score
            ]
        spans = _merge_runs([_run_to_ms(track, run) for run in runs], settings.merge_gap_ms)
        classed = [e for e in entries if e.index >= 0]
        for start_ms, end_ms, first, last in spans:
            if end_ms - start_ms < settings.min_event_ms:
                continue
            if settings.onset_refine:
                start_ms = refine_onset(track, start_ms, first, end_ms)
            # A sound a head found is named by a class only if that class itself was heard.
            floor = settings.onset_threshold if concept in headed else 0.0
            best = _best_entry(track, entries, classed, first, last, floor)
            level, background, floor = _levels(track, int(track.patch_start_ms(first)), end_ms)
            found.append(
                SoundEvent(
                    event_id="",
                    concept=concept,
                    label=best.label,
                    phrase=best.phrase,
                    phrase_present=best.phrase_present,
                    kind=best.kind,
                    priority=best.priority,
                    parent=best.parent,
                    start_ms=start_ms,
                    end_ms=end_ms,
                    peak_score=float(curve[first:last].max()),
                    mean_score=float(curve[first:last].mean()),
                    level_db=level,
                    background_db=background,
                    ancestors=lineage.get(concept, ()),
                    generic=best.generic,
                    parent_wording=_wording(by_concept.get(best.parent or "", ())),
                    floor_db=floor,
                    noun=best.noun,
                    same_sound=best.same_sound,
                )
            )
    found.sort(key=lambda e: (e.start_ms, -e.priority, e.concept))
    return [replace(e, event_id=f"e{number:04d}") for number, e in enumerate(found, start=1)]


def _best_entry(
    track: ScoreTrack,
    entries: tuple[ClassEntry, ...],
    classed: list[ClassEntry],
    first: int,
    last: int,
    floor: float,
) -> ClassEntry:
    """The class that scored highest over the event chooses the wording; when none of the
    concept's classes reached `floor`, its first entry names it."""
    if not classed:
        return entries[0]
    window = track.scores[first:last, [e.index for e in classed]]
    if window.max() < floor:
        return entries[0]
    return classed[int(np.argmax(window.sum(axis=0)))]


def _wording(entries: tuple[ClassEntry, ...]) -> tuple[str, str] | tuple[()]:
    """(phrase, phrase_present) of a concept: its first class names it; () without classes."""
    return (entries[0].phrase, entries[0].phrase_present) if entries else ()


def _run_to_ms(track: ScoreTrack, run: tuple[int, int]) -> tuple[int, int, int, int]:
    """Patch run -> (start_ms, end_ms, first, last).

    A patch sees a sound anywhere in its span; the patch before the run did not, so the
    sound most likely starts where that earlier patch ends, i.e. one hop into the first
    active patch's span minus the overlap. Symmetrically it ends where the patch after
    the run begins.
    """
    first, last = run
    overlap = max(0, track.patch_ms - track.hop_ms)
    start = int(track.patch_start_ms(first)) + (overlap if first > 0 else 0)
    end = int(track.patch_start_ms(last - 1)) + (track.hop_ms if last < track.n_patches else track.patch_ms)
    end = min(max(end, start + track.hop_ms), max(track.duration_ms, start + track.hop_ms))
    return start, end, first, last


def _merge_runs(spans: list[tuple[int, int, int, int]], gap_ms: int) -> list[tuple[int, int, int, int]]:
    merged: list[tuple[int, int, int, int]] = []
    for span in spans:
        if merged and span[0] - merged[-1][1] < gap_ms:
            prev = merged[-1]
            merged[-1] = (prev[0], max(prev[1], span[1]), prev[2], max(prev[3], span[3]))
        else:
            merged.append(span)
    return merged


def _frames(track: ScoreTrack, start_ms: float, end_ms: float) -> np.ndarray:
    first = max(0, int(start_ms / track.frame_ms))
    last = min(track.energy_db.size, int(np.ceil(end_ms / track.frame_ms)))
    return track.energy_db[first:last] if last > first else np.zeros(0, np.float32)


def _levels(track: ScoreTrack, start_ms: int, end_ms: int) -> tuple[float, float, float]:
    """(level, background, floor) in dBFS: the 90th percentile inside, and the median and
    FLOOR_PERCENTILE of the frames within 5 s around."""
    inside = _frames(track, start_ms, end_ms)
    around = np.concatenate(
        [_frames(track, start_ms - 5000, start_ms), _frames(track, end_ms, end_ms + 5000)]
    )
    level = float(np.percentile(inside, 90)) if inside.size else -100.0
    if around.size * track.frame_ms < _MIN_SURROUNDINGS_MS:
        # A sound that fills (nearly) the whole input has no surroundings to compare with;
        # only the absolute level can then tell it from silence.
        return level, -100.0, -100.0
    background = float(np.median(around))
    floor = float(np.percentile(around, FLOOR_PERCENTILE))
    return level, background, floor


def refine_onset(track: ScoreTrack, start_ms: int, first_patch: int, end_ms: int) -> int:
    """Move an onset to the steepest rise in signal level inside the first active patch.

    The sound is somewhere in that patch, so the search covers the patch's span (and never
    reaches the event's end). The level curve is smoothed over 50 ms so single-frame clicks
    do not win; the onset moves only where the rise is at least 6 dB, otherwise it stays.
    """
    low = int(track.patch_start_ms(first_patch))
    high = min(low + track.patch_ms, end_ms - 1)
    first = int(low / track.frame_ms)
    segment = _frames(track, first * track.frame_ms, high)
    width = 5
    if segment.size < 2 * width:
        return start_ms
    smooth = np.convolve(segment, np.ones(width) / width, mode="same")
    rise = smooth[width:] - smooth[:-width]
    best = int(np.argmax(rise))
    if rise[best] < 6.0:
        return start_ms
    return max(0, min(round((first + best + width // 2) * track.frame_ms), end_ms - 1))
