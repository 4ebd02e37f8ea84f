"""Loopback HTTP canary for the tests: a 127.0.0.1 server that records every request.

Used to prove that the PDF engine (or anything else) fetches nothing from the network.
"""

from __future__ import annotations

import http.server
import struct
import threading
import zlib

__all__ = ["Canary", "png_1x1"]


def png_1x1(rgb: tuple[int, int, int]) -> bytes:
    """A valid 1x1 RGB PNG built from the PNG specification (ISO/IEC 15948 chunk layout)."""

    def chunk(kind: bytes, data: bytes) -> bytes:
        return (
            struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data))
        )

    header = struct.pack(">IIBBBBB", 1, 1, 8, 2, 0, 0, 0)
    return (
        b"\x89PNG\r\n\x1a\n"
        + chunk(b"IHDR", header)
        + chunk(b"IDAT", zlib.compress(b"\x00" + bytes(rgb)))
        + chunk(b"IEND", b"")
    )


class Canary:
    """A loopback HTTP server (127.0.0.1, free port) that records every request."""

    def __init__(self) -> None:
        self.requests: list[str] = []
        canary = self

        class Handler(http.server.BaseHTTPRequestHandler):
            def do_GET(self) -> None:  # noqa: N802 - http.server's naming
                canary.requests.append(self.path)
                body = png_1x1((255, 0, 0))
                self.send_response(200)
                self.send_header("Content-Type", "image/png")
                self.send_header("Content-Length", str(len(body)))
                self.end_headers()
                self.wfile.write(body)

            def log_message(self, *args: object) -> None:
                pass

        self.server = http.server.ThreadingHTTPServer(("127.0.0.1", 0), Handler)
        self.server.timeout = 5
        self.port = int(self.server.server_address[1])
        self.url = f"http://127.0.0.1:{self.port}/"
        self.thread = threading.Thread(
            target=self.server.serve_forever, kwargs={"poll_interval": 0.05}
        )

    def __enter__(self) -> Canary:
        self.thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.server.shutdown()
        self.server.server_close()
        self.thread.join(5)
