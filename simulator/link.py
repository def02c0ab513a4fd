"""A TCP proxy on loopback whose connection can be cut and restored, for outage tests.

``FaultyLink(listen_port, target_port)`` forwards every connection made to
``127.0.0.1:listen_port`` to ``127.0.0.1:target_port`` (an OPC UA server, say). :meth:`cut`
resets every open connection and closes the listening socket, so new connections are refused;
:meth:`restore` listens again on the same port. Between the two, the server behind it keeps
running (and keeps recording history), which is how a test reproduces a communications outage
followed by a backfill.

Bounded: loopback only, at most ``max_connections`` at once, and the proxy stops by itself
after ``lifetime_s`` seconds (or on :meth:`stop`, or on leaving a ``with`` block). One daemon
thread moves the bytes (``selectors``).
"""

from __future__ import annotations

import contextlib
import selectors
import socket
import struct
import threading
import time

__all__ = ["FaultyLink", "free_port"]

_HOST = "127.0.0.1"
_CHUNK = 65536


def free_port() -> int:
    """A TCP port on 127.0.0.1 that is free now (the OS picks it).

    >>> 1024 <= free_port() < 65536
    True
    """
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind((_HOST, 0))
        return int(s.getsockname()[1])


def _reset(sock: socket.socket) -> None:
    """Close with a TCP reset (SO_LINGER 0), so the peer notices at once."""
    with contextlib.suppress(OSError):
        sock.setsockopt(socket.SOL_SOCKET, socket.SO_LINGER, struct.pack("ii", 1, 0))
    with contextlib.suppress(OSError):
        sock.close()


class FaultyLink:
    """See the module docstring. ``listen_port=0`` picks a free port (see :attr:`port`)."""

    def __init__(self, listen_port: int, target_port: int, *, max_connections: int = 16,
                 lifetime_s: float = 600.0):
        if not 0 <= listen_port < 65536 or not 0 < target_port < 65536:
            raise ValueError("ports must be within 1–65535 (listen_port 0: any free port)")
        if not 1 <= max_connections <= 256 or not 0.0 < lifetime_s <= 86400.0:
            raise ValueError("max_connections must be within 1–256 and lifetime_s within "
                             "(0, 86400] s")
        self.target_port = target_port
        self.max_connections = max_connections
        self.accepted = 0
        self._deadline = time.monotonic() + lifetime_s
        self._sel = selectors.DefaultSelector()
        self._peers: dict[socket.socket, socket.socket] = {}
        self._lock = threading.Lock()
        self._wake_r, self._wake_w = socket.socketpair()
        self._wake_r.setblocking(False)
        self._sel.register(self._wake_r, selectors.EVENT_READ, "wake")
        self._commands: list[tuple[str, threading.Event]] = []
        self._listener: socket.socket | None = None
        self.port = listen_port
        self._listen()
        self._running = True
        self._thread = threading.Thread(target=self._run, name="faulty-link", daemon=True)
        self._thread.start()

    # -- control (any thread) -------------------------------------------------------------------
    @property
    def connections(self) -> int:
        """Connections open now."""
        with self._lock:
            return len(self._peers) // 2

    @property
    def is_cut(self) -> bool:
        return self._listener is None

    def cut(self) -> None:
        """Reset every connection and refuse new ones until :meth:`restore`."""
        self._command("cut")

    def restore(self) -> None:
        """Accept connections again on the same port."""
        self._command("restore")

    def stop(self) -> None:
        """Close everything and end the thread."""
        if self._thread.is_alive():
            self._command("stop")
        self._thread.join(5.0)

    def __enter__(self) -> FaultyLink:
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()

    def _command(self, what: str) -> None:
        if not self._thread.is_alive():
            raise RuntimeError("the link has stopped")
        done = threading.Event()
        with self._lock:
            self._commands.append((what, done))
        with contextlib.suppress(OSError):
            self._wake_w.send(b"x")
        if not done.wait(5.0):
            raise RuntimeError(f"the link did not {what} in 5 s")

    # -- the thread ---------------------------------------------------------------------------
    def _listen(self) -> None:
        s = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        s.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        s.bind((_HOST, self.port))
        s.listen(self.max_connections)
        s.setblocking(False)
        self.port = int(s.getsockname()[1])
        self._listener = s
        self._sel.register(s, selectors.EVENT_READ, "accept")

    def _unlisten(self) -> None:
        if self._listener is not None:
            self._sel.unregister(self._listener)
            self._listener.close()
            self._listener = None

    def _drop(self, sock: socket.socket) -> None:
        with self._lock:
            peer = self._peers.pop(sock, None)
            if peer is not None:
                self._peers.pop(peer, None)
        for s in (sock, peer):
            if s is not None:
                with contextlib.suppress(KeyError, ValueError):
                    self._sel.unregister(s)
                _reset(s)

    def _drop_all(self) -> None:
        with self._lock:
            socks = list(self._peers)
        for s in socks:
            self._drop(s)

    def _accept(self) -> None:
        assert self._listener is not None
        try:
            client, _ = self._listener.accept()
        except OSError:
            return
        if self.connections >= self.max_connections:
            _reset(client)
            return
        try:
            upstream = socket.create_connection((_HOST, self.target_port), timeout=2.0)
        except OSError:
            _reset(client)
            return
        self.accepted += 1
        for s in (client, upstream):
            s.setblocking(True)
            s.settimeout(5.0)
            s.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        with self._lock:
            self._peers[client] = upstream
            self._peers[upstream] = client
        self._sel.register(client, selectors.EVENT_READ, "data")
        self._sel.register(upstream, selectors.EVENT_READ, "data")

    def _forward(self, sock: socket.socket) -> None:
        with self._lock:
            peer = self._peers.get(sock)
        if peer is None:
            return
        try:
            data = sock.recv(_CHUNK)
            if not data:
                raise ConnectionResetError
            peer.sendall(data)
        except OSError:
            self._drop(sock)

    def _run_commands(self) -> bool:
        with contextlib.suppress(OSError):
            self._wake_r.recv(4096)
        with self._lock:
            commands, self._commands = self._commands, []
        keep = True
        for what, done in commands:
            if what in ("cut", "stop"):
                self._unlisten()
                self._drop_all()
                keep = keep and what != "stop"
            elif what == "restore" and self._listener is None:
                self._listen()
            done.set()
        return keep

    def _run(self) -> None:
        try:
            while self._running and time.monotonic() < self._deadline:
                for key, _ in self._sel.select(timeout=0.2):
                    if key.data == "wake":
                        self._running = self._run_commands()
                        if not self._running:
                            break
                    elif key.data == "accept" and self._listener is not None:
                        self._accept()
                    elif key.data == "data":
                        self._forward(key.fileobj)  # type: ignore[arg-type]
        finally:
            self._unlisten()
            self._drop_all()
            with self._lock:
                for _, done in self._commands:
                    done.set()
            self._sel.close()
            self._wake_r.close()
            self._wake_w.close()
