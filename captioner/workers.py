"""Workers of a batch run: caption one file and return texts, on a process pool or a Dask cluster.

`draft(job)` is all a worker runs. It reads the media and the dialogue subtitles (merging
the sound cues into them), loads the model pack once per process, and returns the outputs
as text; it writes nothing, so workers need only read access to the media, by the same
path as the driver.
`dispatch` runs jobs on one of three executors (in this process, a local process pool,
or an existing Dask scheduler) and yields results as they finish.
"""

from __future__ import annotations

import dataclasses
import os
import socket
import threading
import time
from collections.abc import Callable, Generator, Iterator
from concurrent.futures import FIRST_COMPLETED, Executor, Future, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from contextlib import contextmanager, suppress
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from . import packs, pipeline
from .errors import CaptionerError
from .formats import Format
from .formats.subtitles import dialogue_spans, read_track
from .style import Style

# -- the worker side ----------------------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class Job:
    """One file for a worker; paths are absolute as the workers see them."""

    media: str
    relative: str  # manifest key
    style: Style
    fmt: Format
    pack: str  # pack name or manifest path
    cache: str | None  # pack cache folder; None = the worker's own default
    dialogue: str | None = None  # subtitle file whose cues mark dialogue
    audio_stream: str | None = None  # index, language or title words (None: the default stream)
    dialogue_language: str | None = None  # which embedded subtitle stream marks dialogue


@dataclass(frozen=True, slots=True)
class Drafted:
    """What a worker returns: texts by kind, or an error; times in seconds."""

    relative: str
    error: str = ""
    duration_ms: int = 0
    cues: int = 0
    texts: dict[str, str] = dataclasses.field(default_factory=dict)
    caption_s: float = 0.0
    load_s: float = 0.0  # model loading paid by this job (0 when the worker was warm)
    worker: str = ""
    pack_version: str = ""
    notice: str = ""  # one line for the user, e.g. the chosen audio stream gave no cues


_PACKS: dict[tuple[str, str | None], packs.LoadedPack] = {}
_WARM_UP_S = [0.0]  # loading done by the pool initializer, charged to this process's first job
_PACK_LOCK = threading.Lock()  # Dask may run several jobs per process in threads


def _worker_pack(name: str, cache: str | None) -> tuple[packs.LoadedPack, float]:
    """The pack loaded once per process, and the seconds this call spent loading it."""
    with _PACK_LOCK:
        if (name, cache) in _PACKS:
            return _PACKS[name, cache], 0.0
        began = time.perf_counter()
        pack = packs.load_pack(name, cache=Path(cache) if cache else packs.cache_root(), say=lambda m: None)
        _PACKS[name, cache] = pack
        return pack, time.perf_counter() - began


_ORPHAN_CHECK_S = 0.5  # how often a pool worker looks whether the driver is still there


def exit_with_parent(parent: int, every_s: float = _ORPHAN_CHECK_S) -> threading.Thread:
    """Watch the parent process from a daemon thread; end this process when it is gone.

    A driver killed with SIGKILL cannot stop its workers, and a worker busy with a file
    would otherwise run on for minutes holding its model (a few hundred MB). An orphan is
    re-parented, so its parent id changes: that works on every platform, unlike Linux's
    parent-death signal, which also fires when merely the thread that started it ends.
    """

    def watch() -> None:
        while os.getppid() == parent:
            time.sleep(every_s)
        os._exit(1)  # nothing to save: workers write no files

    watchdog = threading.Thread(target=watch, name="captioner-parent-watch", daemon=True)
    watchdog.start()
    return watchdog


def _warm_worker(name: str, cache: str | None, parent: int) -> None:
    """Process-pool initializer: end with the driver, leave Ctrl-C to it, load the model now."""
    import signal

    exit_with_parent(parent)
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    with suppress(CaptionerError):  # each job then reports the pack error for its own file
        _WARM_UP_S[0] = _worker_pack(name, cache)[1]


def draft(job: Job) -> Drafted:
    """Caption one file and render its outputs; never raises for a bad file."""
    began = time.perf_counter()
    worker = f"{socket.gethostname()}:{os.getpid()}"
    load_s = 0.0
    try:
        pack, load_s = _worker_pack(job.pack, job.cache)
        load_s, _WARM_UP_S[0] = load_s + _WARM_UP_S[0], 0.0
        track = read_track(Path(job.dialogue)) if job.dialogue else None
        dialogue_name = Path(job.dialogue).name if job.dialogue else ""
        result = pipeline.caption_file(
            Path(job.media),
            pack,
            job.style,
            dialogue=dialogue_spans(track.cues) if track else None,
            dialogue_source=dialogue_name or "classifier",
            audio_stream=job.audio_stream,
            dialogue_language=job.dialogue_language,
        )
        drafts = pipeline.draft_outputs(
            result, pack.vocabulary, job.fmt, merge_with=track, dialogue_name=dialogue_name
        )
        texts = {"caption": drafts.track, "events": drafts.events_json()}
        if drafts.merged_text is not None:
            texts["merged"] = drafts.merged_text
        return Drafted(
            job.relative,
            "",
            result.track.duration_ms,
            len(result.cues),
            texts,
            time.perf_counter() - began,
            load_s,
            worker,
            pack.manifest.version,
            result.empty_stream_notice(),
        )
    except CaptionerError as exc:
        return Drafted(
            job.relative, str(exc), caption_s=time.perf_counter() - began, load_s=load_s, worker=worker
        )
    except Exception as exc:
        return Drafted(
            job.relative,
            f"{job.media}: unexpected {type(exc).__name__}: {exc}; please report it",
            caption_s=time.perf_counter() - began,
            worker=worker,
        )


# -- executors ----------------------------------------------------------------------------------


class _Inline(Executor):
    """Runs each job at submit time in this process (for tests and embedding: this process's
    math libraries keep their own thread settings)."""

    def submit(self, fn: Callable[..., Any], /, *args: Any, **kwargs: Any) -> Future[Any]:
        future: Future[Any] = Future()
        try:
            future.set_result(fn(*args, **kwargs))
        except Exception as exc:
            future.set_exception(exc)
        return future


def dispatch(
    jobs: list[Job], *, workers: int = 1, cluster: str | None = None
) -> Generator[Drafted, None, None]:
    """Run the jobs and yield results as they finish, keeping only a few jobs queued
    beyond the workers, so a crashed worker process costs only the files it held."""
    if not jobs:
        return
    if cluster:
        executor, window, close = _dask_executor(cluster)
    else:
        executor, window, close = _local_executor(workers, jobs[0])
    waiting = list(reversed(jobs))
    running: dict[Future[Drafted], Job] = {}
    try:
        with _one_thread_each():
            while waiting or running:
                while waiting and len(running) < window:
                    job = waiting.pop()
                    running[executor.submit(draft, job)] = job
                finished, _ = wait(running, return_when=FIRST_COMPLETED)
                broken = False
                for future in finished:
                    job = running.pop(future)
                    try:
                        yield future.result()
                    except BrokenProcessPool:
                        broken = True
                        yield Drafted(
                            job.relative,
                            f"{job.media}: the worker process stopped while captioning it (out of memory, "
                            "or a crash); run again with --retry-failed",
                        )
                    except Exception as exc:
                        yield Drafted(
                            job.relative,
                            f"{job.media}: the worker failed ({type(exc).__name__}: {exc}); run again with "
                            "--retry-failed",
                        )
                if broken:
                    close(interrupted=True)
                    executor, window, close = _local_executor(workers, job)
    except BaseException:
        close(interrupted=True)
        raise
    close(interrupted=False)


def _local_executor(workers: int, job: Job) -> tuple[Executor, int, Callable[..., None]]:
    """An executor, how many jobs to keep submitted (two per worker: none waits idle for
    its next file), and how to close it. 0 workers: run in this process."""
    if workers <= 0:
        return _Inline(), 1, lambda interrupted: None
    import multiprocessing

    # spawn: a fresh interpreter per worker, never a fork of a process holding onnxruntime threads
    pool = ProcessPoolExecutor(
        workers,
        mp_context=multiprocessing.get_context("spawn"),
        initializer=_warm_worker,
        initargs=(job.pack, job.cache, os.getpid()),
    )

    def close(interrupted: bool) -> None:
        if interrupted:
            # Workers write nothing, so stopping them loses nothing; don't wait for their files.
            for process in list(getattr(pool, "_processes", {}).values()):
                process.terminate()
        pool.shutdown(wait=True, cancel_futures=True)

    return pool, 2 * workers, close


def _dask_executor(address: str) -> tuple[Executor, int, Callable[..., None]]:
    try:
        from distributed import Client as DaskClient
    except ImportError as exc:
        raise CaptionerError(
            "--cluster",
            "needs Dask, which is not installed",
            "install it with: pip install 'captioner[cluster]'",
        ) from exc
    try:
        connect: Any = DaskClient  # the library is untyped
        client = connect(address, timeout=15, set_as_default=False)
    except Exception as exc:  # Dask raises OSError, TimeoutError or ValueError depending on the address
        raise CaptionerError(
            address,
            f"no Dask scheduler answered ({exc})",
            "start one with `dask scheduler` or check the address (tcp://HOST:8786)",
        ) from exc
    threads = max(sum(client.nthreads().values()), 1)
    executor: Executor = client.get_executor(pure=False)

    def close(interrupted: bool) -> None:
        executor.shutdown(wait=not interrupted)
        client.close()

    return executor, 2 * threads, close


@contextmanager
def _one_thread_each() -> Iterator[None]:
    """Worker processes started inside inherit one math-library thread each: the workers
    themselves are the parallelism, and extra threads would only fight over the cores."""
    names = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")
    saved = {name: os.environ.get(name) for name in names}
    for name in names:
        os.environ.setdefault(name, "1")
    try:
        yield
    finally:
        for name, value in saved.items():
            if value is None:
                os.environ.pop(name, None)
