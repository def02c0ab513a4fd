"""OPC UA feed (db/feeds/opcua.py) against a minimal asyncua server started in the test.

The reference is the OPC UA server of the ``asyncua`` library (an independent
implementation of OPC UA Part 4 Read/HistoryRead): values, source timestamps and status
codes written on the server side must come back unchanged through the feed. The server
helper below (:class:`OpcUaTestServer`) is also used by ``test_feed_contract.py``.
Timings asserted here are bounds of this feed's own design (timeouts and back-off), not
published values.
"""
from __future__ import annotations

import asyncio
import doctest
import math
import socket
import threading
import time
from collections.abc import Iterable, Mapping
from datetime import UTC, datetime, timedelta

import pytest
from asyncua import Server, ua

import db.feeds.opcua as opcua_module
from db.feeds.base import FeedError
from db.feeds.opcua import Backoff, OpcUaFeed
from ops_logic.tags import TagDef

NAMESPACE = 2


def free_port() -> int:
    """A loopback TCP port nobody listens on right now."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def tag(name: str, address: str, unit: str = "m") -> TagDef:
    return TagDef(name, "t", "water_level", unit, "pool", "plc", address, 10.0)


class OpcUaTestServer:
    """An asyncua server in its own thread: variables ``ns=2;i=<id>`` (Double), historized
    in the in-memory store (``HistoryDict``). ``stop``/``start`` again reuse the port (a
    restart: a new server object, so the history starts empty)."""

    def __init__(self, node_ids: Iterable[int], port: int | None = None) -> None:
        self.node_ids = list(node_ids)
        self.port = port or free_port()
        self.endpoint = f"opc.tcp://127.0.0.1:{self.port}"
        self._loop: asyncio.AbstractEventLoop | None = None
        self._thread: threading.Thread | None = None
        self._server: Server | None = None
        self._nodes: dict[int, object] = {}

    def _call(self, coro, timeout: float = 10.0):
        assert self._loop is not None
        return asyncio.run_coroutine_threadsafe(coro, self._loop).result(timeout)

    def start(self) -> OpcUaTestServer:
        self._loop = asyncio.new_event_loop()
        self._thread = threading.Thread(target=self._loop.run_forever, daemon=True)
        self._thread.start()
        self._call(self._start())
        return self

    async def _start(self) -> None:
        server = Server()
        await server.init()
        server.set_endpoint(self.endpoint)
        idx = await server.register_namespace("urn:fishway-ops:test")
        assert idx == NAMESPACE
        for i in self.node_ids:
            self._nodes[i] = await server.nodes.objects.add_variable(
                ua.NodeId(i, idx), f"v{i}", ua.Variant(0.0, ua.VariantType.Double))
        await server.start()
        await server.historize_node_data_change(list(self._nodes.values()), period=None)
        self._server = server

    def write(self, values: Mapping[int, float], ts: datetime,
              status: int = ua.StatusCodes.Good) -> None:
        """Set node values with a source timestamp (and status) as a PLC would."""
        async def go() -> None:
            for i, v in values.items():
                await self._nodes[i].write_value(ua.DataValue(
                    ua.Variant(float(v), ua.VariantType.Double), StatusCode=ua.StatusCode(status),
                    SourceTimestamp=ts, ServerTimestamp=ts))
            await asyncio.sleep(0.05)  # let the history subscription store the change
        self._call(go())

    def stop(self) -> None:
        if self._loop is None:
            return
        if self._server is not None:
            self._call(self._server.stop())
        self._server, self._nodes = None, {}
        self._loop.call_soon_threadsafe(self._loop.stop)
        assert self._thread is not None
        self._thread.join(5)
        self._loop.close()
        self._loop = None


class FreezingProxy:
    """A loopback TCP proxy that can go silent: while frozen it swallows every byte both ways
    and keeps the sockets open (a cable pulled somewhere: no reset, no answer)."""

    def __init__(self, upstream_port: int) -> None:
        self.upstream = ("127.0.0.1", upstream_port)
        self.frozen = threading.Event()
        self._listener = socket.create_server(("127.0.0.1", 0))
        self._listener.settimeout(0.2)
        self.port = self._listener.getsockname()[1]
        self._stop = threading.Event()
        self._sockets: list[socket.socket] = []
        threading.Thread(target=self._accept, daemon=True).start()

    def _accept(self) -> None:
        while not self._stop.is_set():
            try:
                down, _ = self._listener.accept()
            except TimeoutError:
                continue
            except OSError:
                return
            up = socket.create_connection(self.upstream)
            self._sockets += [down, up]
            for src, dst in ((down, up), (up, down)):
                threading.Thread(target=self._pump, args=(src, dst), daemon=True).start()

    def _pump(self, src: socket.socket, dst: socket.socket) -> None:
        try:
            while data := src.recv(65536):
                if not self.frozen.is_set():
                    dst.sendall(data)
        except OSError:
            pass

    def close(self) -> None:
        self._stop.set()
        self._listener.close()
        for sock in self._sockets:
            sock.close()


@pytest.fixture(scope="module")
def shared_server():
    """One server for the tests that do not stop it (each writes its own time window)."""
    srv = OpcUaTestServer([1000, 1001, 1002]).start()
    yield srv
    srv.stop()


@pytest.fixture
def server():
    """A server of the test's own, for the tests that stop and restart it."""
    srv = OpcUaTestServer([1000, 1001, 1002]).start()
    yield srv
    srv.stop()


@pytest.fixture
def tags() -> list[TagDef]:
    return [tag("t.forebay_level", "ns=2;i=1000"), tag("t.P01.level", "ns=2;i=1001"),
            tag("t.water_temp", "ns=2;i=1002", unit="degC")]


def fast_feed(endpoint: str, **kw) -> OpcUaFeed:
    return OpcUaFeed("plc", endpoint, timeout_s=kw.pop("timeout_s", 1.0),
                     backoff=kw.pop("backoff", Backoff(0.3, 2.0, 1.2)), **kw)


T0 = datetime(2026, 5, 4, 14, 0, tzinfo=UTC)
T1, T2 = T0 + timedelta(days=1), T0 + timedelta(days=2)  # own windows on the shared server


def test_doctests():
    result = doctest.testmod(opcua_module)
    assert result.attempted > 0 and result.failed == 0


@pytest.mark.parametrize(("failures", "expected_s"), [(0, 0.0), (1, 1.0), (2, 2.0), (3, 4.0),
                                                       (6, 32.0), (7, 60.0), (10_000, 60.0)])
def test_backoff_doubles_up_to_its_cap(failures, expected_s):
    # The design: delay_n = min(1 s · 2^(n−1), 60 s) (defaults); huge n must not overflow.
    assert Backoff().delay_s(failures) == expected_s


@pytest.mark.parametrize("kwargs", [{"first_s": 0}, {"factor": 0.5}, {"first_s": 5, "max_s": 1},
                                    {"first_s": math.nan}])
def test_backoff_refuses_bad_settings(kwargs):
    with pytest.raises(ValueError, match="Backoff"):
        Backoff(**kwargs)


@pytest.mark.parametrize(("endpoint", "timeout"), [("http://127.0.0.1:4840", 1.0),
                                                    ("opc.tcp://127.0.0.1:4840", 0.0)])
def test_constructor_refuses_bad_settings(endpoint, timeout):
    with pytest.raises(ValueError):
        OpcUaFeed("plc", endpoint, timeout_s=timeout)


def test_read_keeps_values_source_times_and_status(shared_server, tags):
    server = shared_server
    server.write({1000: 77.41, 1001: 76.9}, T0)
    server.write({1002: 11.75}, T0 + timedelta(seconds=3), status=ua.StatusCodes.BadSensorFailure)
    feed = fast_feed(server.endpoint)
    try:
        got = {r.tag: r for r in feed.read(tags, datetime.now(UTC))}
    finally:
        feed.close()
    assert list(got) == [t.name for t in tags]
    assert (got["t.forebay_level"].value, got["t.P01.level"].value) == (77.41, 76.9)
    assert got["t.forebay_level"].ts == T0 and got["t.forebay_level"].ts.tzinfo is not None
    assert got["t.forebay_level"].source_ok and got["t.P01.level"].source_ok
    # a Bad status on the server side (BadSensorFailure) → source_ok False, time kept
    assert not got["t.water_temp"].source_ok
    assert got["t.water_temp"].ts == T0 + timedelta(seconds=3)


def test_malformed_and_unknown_addresses_are_reported(shared_server, tags):
    server = shared_server
    server.write({1000: 1.0, 1001: 2.0, 1002: 3.0}, T0 + timedelta(seconds=10))
    feed = fast_feed(server.endpoint)
    asked = [*tags, tag("t.ghost", "ns=2;i=4242"), tag("t.typo", "ns=2;x=oops")]
    try:
        got = {r.tag: r for r in feed.read(asked, datetime.now(UTC))}
    finally:
        feed.close()
    assert set(got) == {t.name for t in asked}
    for name in ("t.ghost", "t.typo"):
        assert not got[name].source_ok and math.isnan(got[name].value)
        assert any(p.startswith(name) for p in feed.problems)
    assert "BadNodeIdUnknown" in next(p for p in feed.problems if p.startswith("t.ghost"))
    assert all(got[t.name].source_ok for t in tags)


def test_server_down_raises_promptly_and_backs_off(tags):
    feed = fast_feed(f"opc.tcp://127.0.0.1:{free_port()}", backoff=Backoff(30.0, 2.0, 60.0))
    try:
        start = time.monotonic()
        with pytest.raises(FeedError, match="connecting"):
            feed.read(tags, datetime.now(UTC))
        assert time.monotonic() - start < 2.0
        start = time.monotonic()
        with pytest.raises(FeedError, match="next attempt in"):
            feed.read(tags, datetime.now(UTC))
        assert time.monotonic() - start < 0.05  # at once during the back-off
        assert feed.failures == 1 and not feed.supports_history
    finally:
        feed.close()


def test_silent_server_times_out_within_the_bound(tags):
    # A socket that accepts connections (kernel backlog) but never answers a byte.
    with socket.socket() as silent:
        silent.bind(("127.0.0.1", 0))
        silent.listen(4)
        feed = fast_feed(f"opc.tcp://127.0.0.1:{silent.getsockname()[1]}", timeout_s=0.5)
        try:
            start = time.monotonic()
            with pytest.raises(FeedError):
                feed.read(tags, datetime.now(UTC))
            assert time.monotonic() - start < 0.5 + 2.5  # timeout_s plus the call margin
        finally:
            feed.close()


def test_silent_link_mid_session_fails_within_the_timeout_then_recovers(shared_server, tags):
    proxy = FreezingProxy(shared_server.port)
    clock = FakeClock()
    feed = fast_feed(f"opc.tcp://127.0.0.1:{proxy.port}", timeout_s=0.5, clock=clock)
    try:
        shared_server.write({1000: 5.0, 1001: 6.0, 1002: 7.0}, T0 + timedelta(minutes=2))
        assert [r.value for r in feed.read(tags, datetime.now(UTC))] == [5.0, 6.0, 7.0]
        proxy.frozen.set()
        start = time.monotonic()
        with pytest.raises(FeedError, match="reading from"):
            feed.read(tags, datetime.now(UTC))
        elapsed = time.monotonic() - start
        assert 0.4 < elapsed < 0.5 + 2.5  # the request timeout, not a hang
        proxy.frozen.clear()
        clock.now += 60  # past the back-off
        assert [r.value for r in feed.read(tags, datetime.now(UTC))] == [5.0, 6.0, 7.0]
    finally:
        feed.close()
        proxy.close()


class FakeClock:
    def __init__(self) -> None:
        self.now = 1000.0

    def __call__(self) -> float:
        return self.now


def test_server_restart_reads_again_after_backoff(server, tags):
    clock = FakeClock()  # the back-off runs on this clock: the test decides when it is over
    feed = fast_feed(server.endpoint, backoff=Backoff(5.0, 2.0, 60.0), clock=clock)
    try:
        server.write({1000: 1.0, 1001: 2.0, 1002: 3.0}, T0)
        assert [r.value for r in feed.read(tags, datetime.now(UTC))] == [1.0, 2.0, 3.0]
        server.stop()
        start = time.monotonic()
        with pytest.raises(FeedError):
            feed.read(tags, datetime.now(UTC))
        assert time.monotonic() - start < 2.0
        server.start()  # same port, fresh server (the client's old session is gone)
        server.write({1000: 4.0, 1001: 5.0, 1002: 6.0}, T0 + timedelta(minutes=1))
        clock.now += 4.9
        start = time.monotonic()
        with pytest.raises(FeedError, match=r"next attempt in 0\.1 s"):
            feed.read(tags, datetime.now(UTC))  # the server is back, the back-off is not over
        assert time.monotonic() - start < 0.05
        clock.now += 0.2
        got = feed.read(tags, datetime.now(UTC))
        assert [r.value for r in got] == [4.0, 5.0, 6.0]
        assert feed.failures == 0 and feed.connected
    finally:
        feed.close()


def test_backoff_grows_while_the_server_stays_down(tags):
    clock = FakeClock()
    feed = fast_feed(f"opc.tcp://127.0.0.1:{free_port()}", backoff=Backoff(1.0, 2.0, 3.0),
                     clock=clock)
    waits = []
    try:
        for _ in range(4):
            with pytest.raises(FeedError):
                feed.read(tags, datetime.now(UTC))
            waits.append(feed._retry_at - clock.now)
            clock.now = feed._retry_at
    finally:
        feed.close()
    assert waits == [1.0, 2.0, 3.0, 3.0]  # min(1 s · 2^(n−1), 3 s)


def test_history_returns_values_written_while_the_client_was_away(shared_server, tags):
    server = shared_server
    feed = fast_feed(server.endpoint)
    try:
        server.write({1000: 10.0, 1001: 20.0, 1002: 30.0}, T1)
        feed.read(tags, datetime.now(UTC))
        feed.close()  # the client goes away; the plant keeps writing
        written = {T1 + timedelta(seconds=10 * k): 10.0 + k for k in range(1, 6)}
        for ts, v in written.items():
            server.write({1000: v, 1001: v + 10}, ts)
        assert feed.supports_history
        got = feed.history(tags[:2], T1 + timedelta(seconds=1), T1 + timedelta(minutes=5))
    finally:
        feed.close()
    level = [(r.ts, r.value) for r in got if r.tag == "t.forebay_level"]
    assert level == sorted(written.items())  # inclusive window, nothing before it
    assert [r.value for r in got if r.tag == "t.P01.level"] == [v + 10 for v in written.values()]
    assert all(r.source_ok for r in got)


def test_history_window_is_inclusive_and_checked(shared_server, tags):
    server = shared_server
    server.write({1000: 1.0}, T2)
    server.write({1000: 2.0}, T2 + timedelta(seconds=1))
    feed = fast_feed(server.endpoint)
    try:
        got = feed.history(tags[:1], T2, T2)
        assert [(r.ts, r.value) for r in got] == [(T2, 1.0)]
        with pytest.raises(ValueError, match="before start"):
            feed.history(tags, T2, T2 - timedelta(seconds=1))
        with pytest.raises(ValueError, match="timezone-aware"):
            feed.history(tags, T2.replace(tzinfo=None), T2)
    finally:
        feed.close()
