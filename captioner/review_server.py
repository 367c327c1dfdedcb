"""Review in place: a small local web server that shows the review page and saves its edits.

Bound to 127.0.0.1 on a free port. Every URL starts with a random token (`secrets`), and a
request is refused (403) unless it carries that token, names this server in its Host
header (so a web page that re-points a domain name at 127.0.0.1 cannot reach it), and,
when it has an Origin header, comes from this server's own origin; a save must have one.
Only four things are served: the page, the media, the caption track and the sidecar.
A save is checked before it is written: it must parse as a track of the file's format,
keep the file's `--update` record unchanged, and start from the version on disk the page
last saw; it is then written through the same atomic write as every output.
"""

from __future__ import annotations

import hashlib
import json
import re
import secrets
import threading
from collections.abc import Mapping
from dataclasses import dataclass
from http import HTTPStatus
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path
from typing import Any

import numpy as np

from .errors import CaptionerError
from .formats import write_atomic
from .formats.subtitles import decode_text, parse_subtitles
from .review import ReviewInputs, load_inputs, page_data, render_page
from .update import read_record

_HOST = "127.0.0.1"
_MAX_SAVE_BYTES = 20 * 1024 * 1024  # far above any caption track; refuses runaway bodies
_RANGE = re.compile(r"^bytes=(\d*)-(\d*)$")
_BLOCK = 1 << 16
_MEDIA_TYPES = {".vtt": "text/vtt; charset=utf-8", ".srt": "application/x-subrip; charset=utf-8"}


@dataclass(frozen=True, slots=True)
class ReviewSite:
    """What one server shows: the inputs, the waveform computed once, and the secret token."""

    inputs: ReviewInputs
    sidecar_path: Path | None
    waveform: np.ndarray | None
    token: str


class ReviewServer(ThreadingHTTPServer):
    """The server with its site; `url` is the page address to open."""

    daemon_threads = True

    def __init__(self, site: ReviewSite, port: int = 0) -> None:
        super().__init__((_HOST, port), _Handler)
        self.site = site
        self.save_lock = threading.Lock()  # one save at a time: version check and write together

    @property
    def origin(self) -> str:
        return f"http://{_HOST}:{self.server_address[1]}"

    @property
    def url(self) -> str:
        return f"{self.origin}/{self.site.token}/"


def start_server(
    media: Path,
    *,
    captions: Path | None,
    sidecar: Path | None,
    waveform: np.ndarray | None,
    port: int = 0,
) -> ReviewServer:
    """A server for one media file (not yet serving: call serve_forever, or run it in a thread).

    Raises:
        MediaError, SubtitleError: the inputs cannot be read (as `review.load_inputs`).
    """
    inputs = load_inputs(media, captions, sidecar)
    return ReviewServer(ReviewSite(inputs, inputs.sidecar_path, waveform, secrets.token_urlsafe(24)), port)


def version(text: str) -> str:
    """The version tag of a track's text: the page saves only over the version it loaded."""
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:16]


def _track_text(inputs: ReviewInputs) -> str:
    path = inputs.captions_path
    return decode_text(path, path.read_bytes())


class _Handler(BaseHTTPRequestHandler):
    server: ReviewServer
    protocol_version = "HTTP/1.1"

    def log_message(self, format: str, *args: Any) -> None:
        pass  # the terminal shows the URL and errors, not every range request of the player

    # ---- checks ------------------------------------------------------------------------
    def _resource(self) -> str | None:
        """The resource name after the token, or None (403 sent) when a check fails."""
        allowed_hosts = {
            f"{_HOST}:{self.server.server_address[1]}",
            f"localhost:{self.server.server_address[1]}",
        }
        origin = self.headers.get("Origin")
        parts = self.path.split("?", 1)[0].split("/")
        token_ok = len(parts) >= 2 and secrets.compare_digest(
            parts[1].encode("latin-1"), self.server.site.token.encode("ascii")
        )
        if not token_ok or self.headers.get("Host") not in allowed_hosts:
            self._refuse(HTTPStatus.FORBIDDEN, "not this review session")
            return None
        if origin is not None and origin not in {f"http://{host}" for host in allowed_hosts}:
            self._refuse(HTTPStatus.FORBIDDEN, "requests from other pages are refused")
            return None
        return "/".join(parts[2:])

    def _refuse(self, status: HTTPStatus, message: str) -> None:
        self._send(status, json.dumps({"error": message}).encode(), "application/json")

    def _send(
        self, status: HTTPStatus, body: bytes, content_type: str, headers: Mapping[str, str] = {}
    ) -> None:
        self.send_response(status)
        self.send_header("Content-Type", content_type)
        self.send_header("Content-Length", str(len(body)))
        self.send_header("Cache-Control", "no-store")
        self.send_header("X-Content-Type-Options", "nosniff")
        self.send_header("Referrer-Policy", "no-referrer")
        for name, value in headers.items():
            self.send_header(name, value)
        self.end_headers()
        if self.command != "HEAD":
            self.wfile.write(body)

    # ---- reading -----------------------------------------------------------------------
    def do_HEAD(self) -> None:
        self.do_GET()

    def do_GET(self) -> None:
        resource = self._resource()
        if resource is None:
            return
        site = self.server.site
        if resource == "":
            self._page()
        elif resource == "media":
            self._file(site.inputs.media, "application/octet-stream")
        elif resource == "track":
            path = site.inputs.captions_path
            self._file(path, _MEDIA_TYPES.get(path.suffix.lower(), "text/plain; charset=utf-8"))
        elif resource == "sidecar" and site.sidecar_path is not None:
            self._file(site.sidecar_path, "application/json")
        else:
            self._refuse(HTTPStatus.NOT_FOUND, "only the page, media, track and sidecar are served")

    def _page(self) -> None:
        site = self.server.site
        try:
            # The track is read again for every page load, so a reload shows what is on disk.
            inputs = load_inputs(site.inputs.media, site.inputs.captions_path, site.sidecar_path)
            save = {"url": "save", "version": version(_track_text(inputs)), "format": inputs.captions.format}
            html = render_page(page_data(inputs, "media", waveform=site.waveform, save=save))
        except CaptionerError as exc:
            self._send(HTTPStatus.INTERNAL_SERVER_ERROR, str(exc).encode(), "text/plain; charset=utf-8")
            return
        self._send(HTTPStatus.OK, html.encode("utf-8"), "text/html; charset=utf-8")

    def _file(self, path: Path, content_type: str) -> None:
        """The file, or the one byte range the player asks for (it seeks by ranges)."""
        size = path.stat().st_size
        first, last, status = 0, size - 1, HTTPStatus.OK
        match = _RANGE.match(self.headers.get("Range", ""))
        if match and (match.group(1) or match.group(2)):
            if match.group(1):
                first, last = int(match.group(1)), int(match.group(2) or size - 1)
            else:
                first = max(0, size - int(match.group(2)))
            last = min(last, size - 1)
            if first > last:
                self._send(
                    HTTPStatus.REQUESTED_RANGE_NOT_SATISFIABLE,
                    b"",
                    content_type,
                    {"Content-Range": f"bytes */{size}"},
                )
                return
            status = HTTPStatus.PARTIAL_CONTENT
        self.send_response(status)
        self.send_header("Content-Type", content_type)
        self.send_header("Content-Length", str(last - first + 1))
        self.send_header("Accept-Ranges", "bytes")
        self.send_header("Cache-Control", "no-store")
        if status == HTTPStatus.PARTIAL_CONTENT:
            self.send_header("Content-Range", f"bytes {first}-{last}/{size}")
        self.end_headers()
        if self.command == "HEAD":
            return
        with path.open("rb") as stream:
            stream.seek(first)
            left = last - first + 1
            try:
                while left > 0 and (block := stream.read(min(_BLOCK, left))):
                    self.wfile.write(block)
                    left -= len(block)
            except (BrokenPipeError, ConnectionResetError):
                pass  # the player dropped a range it no longer needs

    # ---- saving ------------------------------------------------------------------------
    def do_POST(self) -> None:
        resource = self._resource()
        if resource is None:
            return
        if resource != "save":
            self._refuse(HTTPStatus.NOT_FOUND, "only `save` takes a POST")
            return
        if self.headers.get("Origin") is None:
            self._refuse(HTTPStatus.FORBIDDEN, "a save must come from the review page")
            return
        if self.headers.get("Content-Type", "").split(";")[0].strip() != "application/json":
            self._refuse(HTTPStatus.UNSUPPORTED_MEDIA_TYPE, "a save is sent as JSON")
            return
        length = int(self.headers.get("Content-Length") or 0)
        if not 0 < length <= _MAX_SAVE_BYTES:
            self._refuse(HTTPStatus.REQUEST_ENTITY_TOO_LARGE, "a save must hold one caption track")
            return
        try:
            request = json.loads(self.rfile.read(length).decode("utf-8"))
            text, based_on, count = str(request["text"]), str(request["version"]), int(request["cues"])
        except (ValueError, KeyError, TypeError):
            self._refuse(
                HTTPStatus.BAD_REQUEST,
                "a save holds the track's text, its cue count and the version it edits",
            )
            return
        with self.server.save_lock:
            status, answer = save_track(self.server.site.inputs, text, based_on, count)
        self._send(status, json.dumps(answer).encode(), "application/json")


def save_track(
    inputs: ReviewInputs, text: str, based_on: str, count: int
) -> tuple[HTTPStatus, dict[str, Any]]:
    """Check and write the page's track (which holds `count` cues) over the caption file;
    the HTTP status and a JSON answer."""
    path = inputs.captions_path
    try:
        on_disk = _track_text(inputs)
    except (OSError, CaptionerError) as exc:
        return HTTPStatus.CONFLICT, {"error": f"{path.name} cannot be read now ({exc}); nothing was saved"}
    if version(on_disk) != based_on:
        return HTTPStatus.CONFLICT, {
            "error": f"{path.name} changed on disk since this page loaded it; nothing was saved. "
            "Download your version, then reload the page"
        }
    fmt = inputs.captions.format
    try:
        track = parse_subtitles(text, fmt, name=path.name)
    except CaptionerError as exc:
        return HTTPStatus.BAD_REQUEST, {
            "error": f"the edited track does not parse ({exc}); nothing was saved"
        }
    if len(track.cues) != count:
        return HTTPStatus.BAD_REQUEST, {
            "error": f"the edited track reads back as {len(track.cues)} cue(s), not {count}; "
            "nothing was saved"
        }
    if fmt == "vtt" and read_record(text) != read_record(on_disk):
        return HTTPStatus.BAD_REQUEST, {"error": "the edited track lost its update record; nothing was saved"}
    try:
        write_atomic(path, text, force=True)
    except CaptionerError as exc:
        return HTTPStatus.INTERNAL_SERVER_ERROR, {"error": str(exc)}
    return HTTPStatus.OK, {
        "version": version(_track_text(inputs)),
        "cues": len(track.cues),
        "name": path.name,
    }
