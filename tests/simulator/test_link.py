"""FaultyLink with plain sockets: forwarding, cut (reset and refuse), restore, bounds."""
from __future__ import annotations

import socket
import threading
import time

import pytest

from simulator.link import FaultyLink, free_port


@pytest.fixture
def echo():
    """A loopback echo server on a free port (stops with the test)."""
    srv = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    srv.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    srv.bind(("127.0.0.1", 0))
    srv.listen(8)
    srv.settimeout(0.2)
    stop = threading.Event()

    def serve_one(conn):
        with conn:
            conn.settimeout(5.0)
            try:
                while data := conn.recv(65536):
                    conn.sendall(data)
            except OSError:
                pass

    def run():
        while not stop.is_set():
            try:
                conn, _ = srv.accept()
            except TimeoutError:
                continue
            except OSError:
                return
            threading.Thread(target=serve_one, args=(conn,), daemon=True).start()

    thread = threading.Thread(target=run, daemon=True)
    thread.start()
    yield srv.getsockname()[1]
    stop.set()
    thread.join(2.0)
    srv.close()


def _roundtrip(port: int, payload: bytes) -> bytes:
    with socket.create_connection(("127.0.0.1", port), timeout=2.0) as s:
        s.sendall(payload)
        got = b""
        while len(got) < len(payload):
            chunk = s.recv(65536)
            if not chunk:
                break
            got += chunk
        return got


def test_forwards_bytes_both_ways(echo):
    with FaultyLink(0, echo) as link:
        payload = bytes(range(256)) * 1000  # 256 kB, more than one chunk
        assert _roundtrip(link.port, payload) == payload
        assert link.accepted == 1


def test_cut_resets_open_connections_and_refuses_new_ones_until_restored(echo):
    with FaultyLink(0, echo) as link:
        s = socket.create_connection(("127.0.0.1", link.port), timeout=2.0)
        s.sendall(b"ping")
        assert s.recv(4) == b"ping"
        link.cut()
        assert link.is_cut and link.connections == 0
        with pytest.raises(OSError):
            s.sendall(b"again")
            if not s.recv(5):  # an orderly close also counts as the link being gone
                raise ConnectionResetError
        s.close()
        with pytest.raises(ConnectionRefusedError):
            socket.create_connection(("127.0.0.1", link.port), timeout=2.0)
        link.restore()
        assert _roundtrip(link.port, b"back") == b"back"


def test_the_link_stops_by_itself_after_its_lifetime(echo):
    link = FaultyLink(0, echo, lifetime_s=0.5)
    port = link.port
    time.sleep(1.0)
    with pytest.raises(ConnectionRefusedError):
        socket.create_connection(("127.0.0.1", port), timeout=2.0)
    with pytest.raises(RuntimeError, match="stopped"):
        link.cut()
    link.stop()


def test_connections_beyond_the_bound_are_dropped(echo):
    with FaultyLink(0, echo, max_connections=2) as link:
        held = [socket.create_connection(("127.0.0.1", link.port), timeout=2.0)
                for _ in range(2)]
        for s in held:
            s.sendall(b"x")
            assert s.recv(1) == b"x"
        with pytest.raises(OSError):  # reset at connect or at the first exchange
            extra = socket.create_connection(("127.0.0.1", link.port), timeout=2.0)
            try:
                extra.sendall(b"y")
                if not extra.recv(1):
                    raise ConnectionResetError
            finally:
                extra.close()
        for s in held:
            s.close()


def test_a_dead_target_closes_the_client(echo):
    # nothing listens at the target; the client is reset at connect or at the first exchange
    with FaultyLink(0, free_port()) as link, pytest.raises(OSError):
        s = socket.create_connection(("127.0.0.1", link.port), timeout=2.0)
        try:
            s.sendall(b"z")
            if not s.recv(1):
                raise ConnectionResetError
        finally:
            s.close()


@pytest.mark.parametrize("kwargs", [dict(listen_port=-1, target_port=1),
                                    dict(listen_port=0, target_port=0),
                                    dict(listen_port=0, target_port=1, max_connections=0),
                                    dict(listen_port=0, target_port=1, lifetime_s=0.0)])
def test_bad_arguments(kwargs):
    with pytest.raises(ValueError):
        FaultyLink(**kwargs)
