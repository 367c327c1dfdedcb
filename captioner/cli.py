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
from .arguments import DEFAULT_SIDECAR, build_parser
from .errors import CaptionerError, OutputError, SubtitleError

if TYPE_CHECKING:
    from .formats.merge import MergedTrack
    from .formats.subtitles import SubtitleTrack

EXIT_OK, EXIT_SOME_FAILED, EXIT_BAD_INPUT = 0, 1, 2


def main(argv: list[str] | None = None) -> int:
    """Run the command line; returns the exit status."""
    args = build_parser().parse_args(argv)
    try:
        with _warnings_to_stderr():
            return _RUNNERS[args.command](args)
    except CaptionerError as exc:
        if args.debug:
            traceback.print_exc()
        print(f"captioner: error: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("captioner: interrupted; no partial output was written", file=sys.stderr)
        return 130
    except BrokenPipeError:
        # The reader of our standard output went away (`captioner check X | head`): not an
        # error of ours. Point stdout at /dev/null so the interpreter's final flush is silent.
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_OK


@contextmanager
def _warnings_to_stderr() -> Iterator[None]:
    def show(
        message: Warning | str,
        category: type[Warning],
        filename: str,
        lineno: int,
        file: object = None,
        line: str | None = None,
    ) -> None:
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
    from . import media, ownership, packs, pipeline, update
    from .formats import merged_track_path, sound_track_path
    from .formats.merge import check_dialogue
    from .formats.subtitles import dialogue_spans, read_track
    from .report import explain_table, merge_summary, merge_table, progress_bar
    from .style import load_style

    style = load_style(args.style)
    if args.events_json == DEFAULT_SIDECAR:
        args.events_json = sound_track_path(args.input, "json")
    track = read_track(args.dialogue) if args.dialogue else None
    if args.merge and track is None:
        raise SubtitleError("--merge", "needs the dialogue track to merge into", "add --dialogue SUBS")
    merging = bool(args.merge and track is not None)
    if merging and track is not None:
        check_dialogue(track)  # before the classifier runs
        fmt, output = _merged_target(
            args.output, args.format, track, args.dialogue, merged_track_path(args.input, track.format)
        )
    else:
        fmt, output = _output_target(args)
    updating = args.update and update.updatable(output, merge=args.merge)
    # A merged track a person changed stays; the new merge goes beside it as a draft.
    keep_merged = merging and output is not None and not args.force and _changed(output)
    _refuse_overwrite(
        (output, args.events_json),
        (args.input, args.dialogue),
        force=args.force or updating,
        allowed={output} if keep_merged and output is not None else set(),
    )
    # The sound track a person edited is the truth for the sound cues of a merge.
    edited_sounds = sound_track_path(args.input, "vtt")
    merge_edited = merging and _changed(edited_sounds)
    dialogue = dialogue_spans(track.cues) if track is not None else None
    say = _notices(args.quiet)
    media.probe(args.input)  # a mistyped or unreadable input fails before any model download
    pack = packs.load_pack(args.model or packs.DEFAULT_PACK, cache=packs.cache_root(), say=say)
    with progress_bar(enabled=not args.quiet, label=args.input.name) as bar:
        result = pipeline.caption_file(
            args.input,
            pack,
            style,
            audio_stream=args.audio_stream,
            dialogue=dialogue,
            dialogue_language=args.dialogue_language,
            dialogue_source=args.dialogue.name if args.dialogue else "classifier",
            on_start=bar.start,
            on_progress=bar.advance,
        )
    drafts = pipeline.draft_outputs(
        result,
        pack.vocabulary,
        fmt,
        merge_with=track if args.merge else None,
        dialogue_name=args.dialogue.name if args.dialogue else "",
    )
    result, note, merged = drafts.result, drafts.note, drafts.merged  # result: with the merge's left-out cues
    if updating and output is not None:
        text, summary = update.update_vtt(output, result.cues, note)
        say(summary.line())
    elif merge_edited and args.dialogue is not None:
        text = pipeline.merge_kept_track(edited_sounds, args.dialogue, style)
        say(f"merged the sound cues of {edited_sounds} as you left them (changed since captioner wrote it)")
    else:
        text = drafts.track if drafts.merged_text is None else drafts.merged_text
    files: list[tuple[Path, str]] = []
    target = output
    if output is not None:
        target = ownership.draft_path(output) if keep_merged else output
        files.append((target, text))
    else:
        sys.stdout.write(text)
    if args.events_json:
        files.append((Path(args.events_json), drafts.events_json()))
    kept_whole = {output} if updating else set()  # an update keeps every cue of it already
    _write_with_backups(files, force=args.force or updating, keep=kept_whole)
    if args.explain:
        print(explain_table(result), file=sys.stderr)
        if merged is not None:
            print(merge_table(merged), file=sys.stderr)
    if merged is not None:
        _merge_warnings(merged)
    if result.empty_stream_notice():
        say(result.empty_stream_notice())
    if keep_merged:
        say(f"kept {output} as you left it; the new merge is in {target}")
    elif output is not None and not updating:
        say(
            f"{len(result.cues)} cue(s) written to {output}"
            if merged is None
            else f"{output}: {merge_summary(merged)}"
        )
    return EXIT_OK


def _changed(path: Path) -> bool:
    """Whether a file exists and is not exactly what captioner wrote into it."""
    from .ownership import is_ours

    return path.exists() and not is_ours(path)


def _write_with_backups(files: list[tuple[Path, str]], *, force: bool, keep: set[Path | None]) -> None:
    """Write the files together, with a backup of each changed file that `force` replaces
    landing first (files in `keep` are rewritten with all their cues, so need none); each
    backup is named once it is in place, even with --quiet: it is where the person's work is."""
    from .formats import write_together
    from .ownership import backup_path

    backups: dict[Path, tuple[Path, bytes]] = {}  # changed file -> (its backup, its bytes)
    for path, text in files:
        if not force or path in keep or not _changed(path):
            continue
        old = path.read_bytes()
        if old != text.encode("utf-8"):
            backups[path] = (backup_path(path), old)
    write_together([*backups.values(), *files])
    for path, (backup, _) in backups.items():
        print(
            f"captioner: kept the old {path} as {backup}: it differs from what captioner last wrote there",
            file=sys.stderr,
        )


def _merge(args: argparse.Namespace) -> int:
    from . import pipeline
    from .formats import sidecar
    from .formats.merge import merge_json, sound_cues_from_track
    from .formats.subtitles import read_track
    from .ownership import sealed
    from .report import merge_summary, merge_table
    from .style import load_style

    style = load_style(args.style)
    dialogue = read_track(args.dialogue_subs)
    _, output = _merged_target(args.output, None, dialogue, args.dialogue_subs, None)
    _refuse_overwrite((output, args.events_json), (args.sound_cues, args.dialogue_subs), force=args.force)
    note = (
        f"Dialogue of {args.dialogue_subs.name} with the sound captions of {args.sound_cues.name}\n"
        f"merged by captioner {__version__}, style {style.name}; review before publishing"
    )
    merged, text = pipeline.merge_text(
        dialogue, sound_cues_from_track(read_track(args.sound_cues)), style, note
    )
    files: list[tuple[Path, str]] = []
    if output is None:
        sys.stdout.write(text)
    else:
        files.append((output, text))
    if args.events_json:
        document = {
            "dialogue": args.dialogue_subs.name,
            "sound_cues_file": args.sound_cues.name,
            "style": style.name,
            "strategy": style.merge.strategy,
            **merge_json(merged),
        }
        files.append((Path(args.events_json), sealed(sidecar.dumps(document), "json")))
    _write_with_backups(files, force=args.force, keep=set())
    if args.explain:
        print(merge_table(merged), file=sys.stderr)
    _merge_warnings(merged)
    if output is not None:
        _notices(args.quiet)(f"{output}: {merge_summary(merged)} (see --explain)")
    return EXIT_OK


def _merge_warnings(merged: MergedTrack) -> None:
    """Each sound left out and each alert placed against the limits: one line, even with --quiet."""
    from .report import merge_warnings

    for line in merge_warnings(merged):
        print(f"captioner: warning: {line}", file=sys.stderr)


def _merged_target(
    output: str | None, fmt: str | None, dialogue: SubtitleTrack, dialogue_path: Path, default: Path | None
) -> tuple[str, Path | None]:
    """Format and path of a merged track: it must be in the dialogue's format, carried over exactly."""
    path = None if output == "-" else Path(output) if output else default
    suffix = path.suffix.lower().lstrip(".") if path is not None else ""
    wanted = fmt or (suffix if suffix in ("vtt", "srt") else dialogue.format)
    if wanted != dialogue.format:
        raise SubtitleError(
            dialogue_path,
            f"is {dialogue.format.upper()} but the merged track would be {wanted.upper()}",
            f"write a .{dialogue.format} file: dialogue cues are carried over exactly, so the formats must "
            "match",
        )
    return wanted, path


def _refuse_overwrite(
    outputs: tuple[Path | None, ...],
    inputs: tuple[Path | None, ...],
    *,
    force: bool,
    allowed: set[Path] | None = None,
) -> None:
    """Check every output before any work, so a run never stops after writing half of them:
    never an input file, never two outputs on one path, a writable folder, and no file a
    person changed without --force (a file captioner wrote and nobody changed is replaced;
    `allowed` files are dealt with by the caller)."""
    sources = {p.resolve() for p in inputs if p is not None}
    seen: set[Path] = set()
    for target in outputs:
        if target is None:
            continue
        resolved = target.resolve()
        if resolved in sources:
            raise OutputError(
                target, "is one of the input files, which are never modified", "choose another output path"
            )
        if resolved in seen:
            raise OutputError(target, "is named for two outputs", "give each output its own path")
        seen.add(resolved)
        folder = resolved.parent
        if not folder.is_dir():
            raise OutputError(target, f"folder {folder} does not exist", "create it or choose another path")
        if not os.access(folder, os.W_OK):
            raise OutputError(target, f"folder {folder} is not writable", "choose a writable folder")
        if not force and target not in (allowed or set()) and _changed(target):
            update = "--update to keep every cue in it and add new ones, " if target.suffix == ".vtt" else ""
            raise OutputError(
                target,
                "already exists and is not what captioner wrote into it (it may hold hand edits)",
                f"pass {update}--force to replace it (the old file is kept as a backup), or choose another "
                "path",
            )


def _output_target(args: argparse.Namespace) -> tuple[str, Path | None]:
    if args.output == "-":
        return args.format or "vtt", None
    if args.output:
        output = Path(args.output)
        suffix = output.suffix.lower().lstrip(".")
        if args.format and suffix in ("vtt", "srt") and suffix != args.format:
            raise OutputError(
                output,
                f"is named .{suffix} but --format {args.format} was asked for",
                f"name the file .{args.format}, or leave out --format to follow the extension",
            )
        return args.format or (suffix if suffix in ("vtt", "srt") else "vtt"), output
    fmt = args.format or "vtt"
    from .formats import sound_track_path

    return fmt, sound_track_path(args.input, fmt)


def _batch(args: argparse.Namespace) -> int:
    from . import library, packs
    from .manifest import summary_json, summary_table
    from .style import load_style

    if args.workers is not None and args.workers < 1:
        raise CaptionerError(
            "--workers", f"--workers {args.workers} is not a number of processes", "pass 1 or more"
        )
    options = library.BatchOptions(
        folder=args.folder,
        style=load_style(args.style),
        output_dir=args.output_dir,
        fmt=args.format,
        pack=args.model or packs.DEFAULT_PACK,
        workers=args.workers or os.cpu_count() or 1,
        cluster=args.cluster,
        retry_failed=args.retry_failed,
        audio_stream=args.audio_stream,
        dialogue_language=args.dialogue_language,
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


def _teach(args: argparse.Namespace) -> int:
    from . import packs
    from .fitting import report_table, train_heads
    from .formats import write_together
    from .heads import heads_bytes
    from .style import load_style
    from .teach import TeachError, build_training_set, check_clips, read_folder, read_label_csv

    head_path: Path = args.output
    manifest_path = head_path.with_name(
        head_path.name.removesuffix(".npz").removesuffix(".heads") + ".pack.yaml"
    )
    for target in (head_path, manifest_path):
        if target.exists() and not args.force:
            raise OutputError(target, "already exists", "pass --force to replace it, or choose another -o")
    if args.folds < 2:
        raise TeachError(f"--folds {args.folds}", "needs at least 2 folds", "pass --folds 5")
    source: Path = args.source
    if not source.exists():
        raise TeachError(source, "not found", "pass a folder of clips or a CSV of labels")
    clips = read_label_csv(source) if source.is_file() else read_folder(source)
    say = _notices(args.quiet)
    pack = packs.load_pack(args.model or packs.DEFAULT_PACK, cache=packs.cache_root(), say=say)
    concepts = check_clips(clips, pack.vocabulary.concepts(), source)
    detection = load_style("brackets").detection
    data = build_training_set(
        clips,
        concepts,
        pack,
        hop_ms=detection.patch_hop_ms,
        level_spread_db=detection.level_spread_db,
        say=say,
    )
    heads, reports = train_heads(
        data, folds=args.folds, info={"source": source.name, "clips": len(clips)}, say=say
    )
    print(report_table(reports))
    head_file = heads_bytes(heads)
    digest = packs.sha256_of(head_file)
    base = pack.manifest.name if args.model is None or args.model in packs.builtin_packs() else args.model
    manifest = (
        f"# Written by captioner teach: the {base} pack plus heads for {', '.join(concepts)}.\n"
        f"name: {manifest_path.name.removesuffix('.pack.yaml')}\nextends: {base}\n"
        f"heads:\n  - file: {head_path.name}\n    sha256: {digest}\n"
    )
    write_together([(head_path, head_file), (manifest_path, manifest)])  # both land, or neither
    say(f"wrote {head_path} and {manifest_path}; use it with --model {manifest_path}")
    return EXIT_OK


def _evaluate(args: argparse.Namespace) -> int:
    from . import packs
    from .evaluation import evaluate_captions, quality_json, quality_table
    from .formats import write_atomic
    from .separability import evaluate_scores, separability_json, separability_table

    if args.json not in (None, "-") and Path(args.json).exists() and not args.force:
        raise OutputError(
            args.json, "already exists", "pass --force to replace it, or choose another --json path"
        )
    if args.scores:
        separation = evaluate_scores(
            args.truth,
            args.captions,
            cache=packs.cache_root(),
            concepts_path=args.concepts,
            score_map_path=args.score_map,
            durations_path=args.durations,
            dialogue_path=args.dialogue,
        )
        table, data = separability_table(separation), separability_json(separation)
    else:
        quality = evaluate_captions(
            args.truth,
            args.captions,
            concepts_path=args.concepts,
            collar_ms=round(args.collar * 1000),
            dialogue_path=args.dialogue,
            durations_path=args.durations,
        )
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
    if args.serve:
        return _review_served(args)
    from .formats import sound_track_path, write_atomic
    from .review import build_page, default_captions

    # The default track and sidecar are inputs too, even when they were not named.
    inputs = (
        args.input,
        args.captions or default_captions(args.input),
        args.events_json or sound_track_path(args.input, "json"),
    )
    _refuse_overwrite((args.output,), inputs, force=args.force)
    print(f"captioner: reading the waveform of {args.input.name}", file=sys.stderr)
    write_atomic(
        args.output,
        build_page(args.input, args.output, captions=args.captions, sidecar=args.events_json),
        force=args.force,
    )
    print(
        f"captioner: review page written to {args.output}; open it in a browser (it needs {args.input.name} "
        "at the same relative path)",
        file=sys.stderr,
    )
    return EXIT_OK


def _review_served(args: argparse.Namespace) -> int:
    import webbrowser

    from .review import load_inputs, waveform
    from .review_server import start_server

    load_inputs(args.input, args.captions, args.events_json)  # unreadable inputs fail before any decoding
    print(f"captioner: reading the waveform of {args.input.name}", file=sys.stderr)
    try:
        server = start_server(
            args.input,
            captions=args.captions,
            sidecar=args.events_json,
            waveform=waveform(args.input),
            port=args.port,
        )
    except OSError as exc:
        raise OutputError(
            f"port {args.port}",
            f"cannot listen on it ({exc.strerror})",
            "leave out --port to take a free one",
        ) from exc
    with server:
        track = server.site.inputs.captions_path
        print(f"captioner: reviewing {track} at {server.url}", flush=True)
        print("captioner: saving in the page writes that file; press Ctrl-C here to stop", file=sys.stderr)
        if not args.no_browser:
            webbrowser.open(server.url)
        try:
            server.serve_forever()
        except KeyboardInterrupt:
            print("captioner: review server stopped", file=sys.stderr)
    return EXIT_OK


def _check(args: argparse.Namespace) -> int:
    from .qc import check_track, report_json, report_lines
    from .style import load_style

    report = check_track(args.track, load_style(args.style))
    if args.json:
        print(json.dumps(report_json(report), indent=1))
    else:
        print("\n".join(report_lines(report)))
    return EXIT_OK if report.ok else EXIT_SOME_FAILED


def _deliver(args: argparse.Namespace) -> int:
    from .formats import write_atomic
    from .formats.delivery import delivery_text
    from .formats.subtitles import read_track, subtitle_format

    track = read_track(args.track)
    if subtitle_format(args.output) != track.format:
        raise OutputError(
            args.output,
            f"is not a .{track.format} file like {args.track.name}",
            f"name a .{track.format} output",
        )
    # The working file is an input: it keeps its NOTE heading and edit record for --update.
    _refuse_overwrite((args.output,), (args.track,), force=args.force)
    write_atomic(args.output, delivery_text(track), force=args.force)
    print(
        f"captioner: {len(track.cues)} cue(s) written to {args.output} without NOTE blocks", file=sys.stderr
    )
    return EXIT_OK


def _streams(args: argparse.Namespace) -> int:
    from .probing import probe
    from .report import streams_table

    print(streams_table(probe(args.input)))
    return EXIT_OK


def _styles(args: argparse.Namespace) -> int:
    from .errors import StyleError
    from .style import builtin_styles, load_style

    presets = builtin_styles()
    if args.name:
        if args.name not in presets:
            raise StyleError(args.name, "no such preset", f"use one of {', '.join(sorted(presets))}")
        sys.stdout.write(presets[args.name].read_text(encoding="utf-8"))
        return EXIT_OK
    for name, path in sorted(presets.items()):
        style = load_style(str(path))
        print(f"{name:<10} {style.description}")
    return EXIT_OK


# One runner per subcommand; each returns the exit status.
_RUNNERS: dict[str, Callable[[argparse.Namespace], int]] = {
    "caption": _caption,
    "merge": _merge,
    "batch": _batch,
    "review": _review,
    "evaluate": _evaluate,
    "models": _models,
    "styles": _styles,
    "teach": _teach,
    "check": _check,
    "deliver": _deliver,
    "streams": _streams,
}


if __name__ == "__main__":
    sys.exit(main())
