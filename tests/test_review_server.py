"""The review server over plain HTTP: who may read and save, what it serves, how it saves.

Saved tracks are read back with the reference parser webvtt-py; the `--update` record is
checked with update.py's own reader and reconciliation, as a re-run would use them.
"""

from __future__ import annotations

import http.client
import io
import json
import os
import signal
import subprocess
import sys
import threading
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
import webvtt

from captioner import update
from captioner.cues import Cue
from captioner.review_server import ReviewServer, start_server, version
from conftest import tone, write_wav

MACHINE = (
    Cue(1000, 2000, ("[door slams]",), ("e0001",)),
    Cue(4000, 5200, ("[dog barking]",), ("e0003",)),
)


@pytest.fixture
def served(tmp_path: Path) -> Iterator[ReviewServer]:
    media = write_wav(tmp_path / "clip.wav", tone(6.0, 440.0))
    (tmp_path / "clip.sounds.vtt").write_text(update.recorded_vtt(MACHINE, "drafted for a test"))
    (tmp_path / "clip.sounds.json").write_text(json.dumps({"events": [], "duration_ms": 6000}))
    (tmp_path / "secret.txt").write_text("not for the browser")
    server = start_server(media, captions=None, sidecar=None, waveform=None)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        yield server
    finally:
        server.shutdown()
        server.server_close()


def _request(
    server: ReviewServer,
    method: str,
    path: str,
    *,
    headers: dict[str, str] | None = None,
    body: bytes | None = None,
) -> tuple[int, bytes, http.client.HTTPResponse]:
    connection = http.client.HTTPConnection("127.0.0.1", server.server_address[1], timeout=10)
    connection.putrequest(method, path, skip_host=True, skip_accept_encoding=True)
    wanted = {"Host": f"127.0.0.1:{server.server_address[1]}", **(headers or {})}
    if body is not None:
        wanted["Content-Length"] = str(len(body))
    for name, value in wanted.items():
        if value:  # an empty value leaves the header out
            connection.putheader(name, value)
    connection.endheaders(body)
    response = connection.getresponse()
    data = response.read()
    connection.close()
    return response.status, data, response


def _track(server: ReviewServer) -> Path:
    return server.site.inputs.captions_path


def _save_body(server: ReviewServer, text: str, based_on: str | None = None, cues: int = 2) -> bytes:
    current = based_on or version(_track(server).read_text())
    return json.dumps({"text": text, "version": current, "cues": cues}).encode()


def _edited(server: ReviewServer) -> str:
    return _track(server).read_text().replace("[dog barking]", "[small dog yapping]")


def test_server_listens_on_loopback_only_with_a_long_random_token(served: ReviewServer) -> None:
    assert served.server_address[0] == "127.0.0.1"
    assert len(served.site.token) >= 32 and served.url == f"{served.origin}/{served.site.token}/"
    other = start_server(served.site.inputs.media, captions=None, sidecar=None, waveform=None)
    other.server_close()
    assert other.site.token != served.site.token


def test_the_page_media_track_and_sidecar_are_served_and_nothing_else(served: ReviewServer) -> None:
    token = served.site.token
    status, page, response = _request(served, "GET", f"/{token}/")
    assert status == 200 and response.getheader("Content-Type", "").startswith("text/html")
    assert b"connect-src 'self'" in page
    media = served.site.inputs.media.read_bytes()
    status, body, response = _request(served, "GET", f"/{token}/media", headers={"Range": "bytes=100-199"})
    # RFC 9110 §14.4: a satisfiable range is answered with 206 and Content-Range
    assert status == 206 and body == media[100:200]
    assert response.getheader("Content-Range") == f"bytes 100-199/{len(media)}"
    assert _request(served, "GET", f"/{token}/track")[1] == _track(served).read_bytes()
    assert _request(served, "GET", f"/{token}/sidecar")[0] == 200
    for path in ("secret.txt", "../secret.txt", "%2e%2e/secret.txt", "clip.wav", "media/../secret.txt"):
        status, body, _ = _request(served, "GET", f"/{token}/{path}")
        assert status == 404 and b"not for the browser" not in body


@pytest.mark.parametrize(
    ("path", "headers"),
    [
        ("/", {}),  # no token
        ("/not-the-token/", {}),  # a wrong token
        ("/{token}/", {"Host": "attacker.example:80"}),  # a rebound domain name
        ("/{token}/", {"Host": ""}),
        ("/{token}/", {"Origin": "http://attacker.example"}),  # another site's page
        ("/{token}/media", {"Origin": "null"}),
    ],
)
def test_reads_without_token_or_with_a_foreign_host_or_origin_are_refused(
    served: ReviewServer, path: str, headers: dict[str, str]
) -> None:
    status, body, _ = _request(served, "GET", path.format(token=served.site.token), headers=headers)
    assert status == 403 and b"WEBVTT" not in body and b"<html" not in body


def test_a_token_of_other_characters_is_refused_not_crashed_on(served: ReviewServer) -> None:
    import socket

    with socket.create_connection(("127.0.0.1", served.server_address[1]), timeout=10) as connection:
        host = f"127.0.0.1:{served.server_address[1]}".encode()
        connection.sendall(b"GET /t\xc3\xb6ken/ HTTP/1.1\r\nHost: " + host + b"\r\nConnection: close\r\n\r\n")
        answer = connection.recv(100)
    assert answer.startswith(b"HTTP/1.1 403")


@pytest.mark.parametrize(
    ("path", "headers"),
    [
        ("/save", {"Origin": "{origin}"}),  # no token
        ("/{token}/save", {}),  # no Origin: not sent by the page
        ("/{token}/save", {"Origin": "http://attacker.example"}),
        ("/{token}/save", {"Origin": "{origin}", "Host": "attacker.example"}),
        ("/{token}/save", {"Origin": "{origin}", "Content-Type": "text/plain"}),  # a form post
    ],
)
def test_saves_without_token_origin_or_json_are_refused_and_change_nothing(
    served: ReviewServer, path: str, headers: dict[str, str]
) -> None:
    before = _track(served).read_bytes()
    wanted = {"Content-Type": "application/json"} | {
        name: value.format(origin=served.origin) for name, value in headers.items()
    }
    status, _, _ = _request(
        served,
        "POST",
        path.format(token=served.site.token),
        headers=wanted,
        body=_save_body(served, _edited(served)),
    )
    assert status in (403, 415)
    assert _track(served).read_bytes() == before


def _save(served: ReviewServer, body: bytes) -> tuple[int, dict[str, Any]]:
    status, answer, _ = _request(
        served,
        "POST",
        f"/{served.site.token}/save",
        headers={"Origin": served.origin, "Content-Type": "application/json"},
        body=body,
    )
    return status, json.loads(answer)


def test_a_save_writes_the_track_in_place_and_update_keeps_the_edit(served: ReviewServer) -> None:
    status, answer = _save(served, _save_body(served, _edited(served)))
    assert status == 200 and answer["cues"] == 2
    text = _track(served).read_text()
    assert answer["version"] == version(text)
    assert [c.text for c in webvtt.from_buffer(io.StringIO(text)).captions] == [
        "[door slams]",
        "[small dog yapping]",
    ]
    merged, summary = update.update_vtt(_track(served), MACHINE, "drafted again")
    assert "[small dog yapping]" in merged and "[dog barking]" not in merged
    assert summary.kept_edited == 1
    assert not list(_track(served).parent.glob(".clip.sounds.vtt.*"))  # no temporary file left


def test_a_save_over_a_file_changed_on_disk_is_refused(served: ReviewServer) -> None:
    stale = version(_track(served).read_text())
    _track(served).write_text(_track(served).read_text().replace("[door slams]", "[door creaks]"))
    before = _track(served).read_bytes()
    status, answer = _save(served, _save_body(served, _edited(served), based_on=stale))
    assert status == 409 and "changed on disk" in answer["error"]
    assert _track(served).read_bytes() == before


@pytest.mark.parametrize(
    ("change", "problem"),
    [
        (lambda text: text.replace("WEBVTT", "WEBVT"), "does not parse"),
        # a damaged timing line turns a cue into text of the one before: the count tells
        (lambda text: text.replace("00:00:04.000 --> ", "00:00:04.000 -> "), "reads back as 1 cue(s), not 2"),
        (lambda text: text.replace(update.RECORD_HEADING, "NOTE something else"), "record"),
    ],
)
def test_a_broken_track_or_a_lost_record_is_not_written(
    served: ReviewServer, change: Any, problem: str
) -> None:
    before = _track(served).read_bytes()
    status, answer = _save(served, _save_body(served, change(_edited(served))))
    assert status == 400 and problem in answer["error"]
    assert _track(served).read_bytes() == before


def test_review_serve_prints_its_address_and_stops_on_ctrl_c(tmp_path: Path) -> None:
    media = write_wav(tmp_path / "clip.wav", tone(1.0))
    (tmp_path / "clip.sounds.vtt").write_text(update.recorded_vtt(MACHINE[:1], "test"))
    process = subprocess.Popen(
        [sys.executable, "-m", "captioner", "review", str(media), "--serve", "--no-browser"],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env={**os.environ, "BROWSER": "false"},
    )
    try:
        assert process.stdout is not None
        line = process.stdout.readline()
        url = line.rsplit(" at ", 1)[1].strip()
        assert url.startswith("http://127.0.0.1:")
        host, path = url.removeprefix("http://").split("/", 1)
        connection = http.client.HTTPConnection(host, timeout=10)
        connection.request("GET", "/" + path)
        response = connection.getresponse()
        assert response.status == 200 and b"review-data" in response.read()
        connection.close()
    finally:
        process.send_signal(signal.SIGINT)
        _, err = process.communicate(timeout=20)
    assert process.returncode == 0 and "stopped" in err and "Traceback" not in err
