"""Body limit and bad bodies against a real uvicorn process (not only the ASGI app):
a declared 10 MB body, a chunked body that would never end, and the corpus's largest
cases. The server must answer 413 before it has read the whole body, and keep serving.
"""

from __future__ import annotations

import select
import socket
import time

import httpx
import pytest

from tests.reliability.bad_inputs import CASES
from tests.reliability.server import ServerProcess

LIMIT = 2 * 1024 * 1024  # the default body limit
CHUNK = 64 * 1024
# What the client would send if nobody stopped it: ten times the limit.
WOULD_SEND = 10 * LIMIT


def _read_response(sock: socket.socket, already: bytes = b"") -> bytes:
    """Head and body of one HTTP/1.1 answer (bounded: at most 1 MB, socket timeout set)."""
    answer = already
    try:
        while len(answer) < 1_000_000:
            head, separator, body = answer.partition(b"\r\n\r\n")
            if separator:
                length = 0
                for line in head.split(b"\r\n")[1:]:
                    name, _, value = line.partition(b":")
                    if name.strip().lower() == b"content-length":
                        length = int(value.strip())
                if len(body) >= length:
                    return answer
            data = sock.recv(65536)
            if not data:
                return answer
            answer += data
    except ConnectionResetError:
        pass
    return answer


def _healthy(server: ServerProcess) -> bool:
    return httpx.get(f"{server.base_url}/healthz", timeout=5).status_code == 200


def test_declared_ten_megabytes_is_refused_unread(served):
    server, keys = served
    with socket.create_connection(("127.0.0.1", server.port), timeout=10) as sock:
        sock.sendall(
            b"POST /api/v1/readings HTTP/1.1\r\nHost: test\r\n"
            b"Authorization: Bearer " + keys["device"].encode() + b"\r\n"
            b"Content-Type: application/json\r\n"
            b"Content-Length: " + str(10 * 1024 * 1024).encode() + b"\r\n\r\n"
        )
        # Not one byte of the body is sent; the answer comes anyway.
        answer = _read_response(sock)
    assert answer.startswith(b"HTTP/1.1 413"), answer[:200]
    assert b"larger than the limit" in answer
    assert _healthy(server)


def test_endless_chunked_body_is_cut_off_at_the_limit(served):
    server, keys = served
    sent = 0
    with socket.create_connection(("127.0.0.1", server.port), timeout=10) as sock:
        sock.sendall(
            b"POST /api/v1/readings HTTP/1.1\r\nHost: test\r\n"
            b"Authorization: Bearer " + keys["device"].encode() + b"\r\n"
            b"Content-Type: application/json\r\nTransfer-Encoding: chunked\r\n\r\n"
        )
        chunk = b"%x\r\n" % CHUNK + b" " * CHUNK + b"\r\n"
        deadline = time.monotonic() + 60
        while sent < WOULD_SEND and time.monotonic() < deadline:
            readable, _, _ = select.select([sock], [], [], 0)
            if readable:
                break
            try:
                sock.sendall(chunk)
            except (BrokenPipeError, ConnectionResetError):
                break
            sent += CHUNK
        sock.settimeout(10)
        answer = _read_response(sock)
    assert answer.startswith(b"HTTP/1.1 413"), answer[:200]
    assert b"larger than the limit" in answer
    # The server answered long before the client would have finished: it stopped reading.
    assert sent < WOULD_SEND / 2, sent
    assert _healthy(server)


@pytest.mark.parametrize(
    "case",
    [c for c in CASES if c.status in (400, 413, 415) or "100000" in c.name],
    ids=lambda c: c.name,
)
def test_corpus_body_cases_against_uvicorn(served, case):
    server, keys = served
    headers = case.headers() | {"Authorization": f"Bearer {keys[case.role]}"}
    response = httpx.request(
        case.method,
        server.base_url + case.path,
        content=case.body(),
        params=case.params,
        headers=headers,
        timeout=60,
    )
    assert response.status_code == case.status, response.text[:500]
    assert case.phrase.lower() in response.text.lower()
    assert _healthy(server)
