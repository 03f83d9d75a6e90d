"""A TCP relay that can be switched on later: a server that is down, then comes back."""

from __future__ import annotations

import contextlib
import socket
import threading
from urllib.parse import urlparse


class Relay:
    """Listens on a fixed local port only once `start()` is called; forwards to `target_url`.

    Before `start()` the port is bound but not listening, so a client's connection is refused —
    what an acquisition PC sees while the server is down.
    """

    def __init__(self, target_url: str) -> None:
        parsed = urlparse(target_url)
        self.target = (parsed.hostname, parsed.port)
        self.sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        self.sock.bind(("127.0.0.1", 0))
        self.port = self.sock.getsockname()[1]
        self.url = f"http://127.0.0.1:{self.port}"
        self._stop = threading.Event()

    def start(self) -> None:
        self.sock.listen(8)
        self.sock.settimeout(0.2)
        threading.Thread(target=self._accept, daemon=True).start()

    def close(self) -> None:
        self._stop.set()
        self.sock.close()

    def _accept(self) -> None:
        while not self._stop.is_set():
            try:
                client, _ = self.sock.accept()
            except (TimeoutError, OSError):
                continue
            upstream = socket.create_connection(self.target)
            for a, b in ((client, upstream), (upstream, client)):
                threading.Thread(target=self._pump, args=(a, b), daemon=True).start()

    @staticmethod
    def _pump(source: socket.socket, sink: socket.socket) -> None:
        try:
            while data := source.recv(65536):
                sink.sendall(data)
        except OSError:
            pass
        finally:
            for s in (source, sink):
                with contextlib.suppress(OSError):
                    s.shutdown(socket.SHUT_RDWR)
