"""OPC UA feed: one bulk Read per cycle, HistoryRead for backfill, reconnection with back-off.

The feed is an OPC UA *client* (``asyncua``) of the plant's server. Each tag is addressed by
its node id, ``TagDef.address`` (``ns=2;i=1000`` by default, see :mod:`ops_logic.tags`); the
server must publish each value in the tag's SI unit (``TagDef.unit``): the feed converts
types (bool → 0/1, integers → float), never units.

Read
----
``read(tags, now)`` sends one Read service request for the Value attribute of every tag and
keeps each value's source timestamp (the server timestamp when the source gave none,
``now`` when neither is given) and status code. Only a Good status is ``source_ok``; an
Uncertain or Bad status comes back as a reading with ``source_ok=False`` (value NaN when
the server sent none), so the gap is stored and visible.

Unknown addresses (the documented choice of this feed): a tag whose address the server does
not know (status ``BadNodeIdUnknown``/``BadNodeIdInvalid``) or that is not a valid node id
string still gets one reading, with ``source_ok=False`` and value NaN, and a line naming
the tag, the address and the reason is put in :attr:`OpcUaFeed.problems` (replaced at each
read) and logged as a warning once per tag. Nothing is dropped silently.

Failures and back-off
---------------------
A failure of the connection (refused, timed out after ``timeout_s``, lost, session gone
after a server restart) raises :class:`~db.feeds.base.FeedError`. The client is then
closed and thrown away (``asyncua`` does not reconnect by itself after a server restart;
its watchdog, run with ``auto_reconnect=False``, only marks the connection lost, which the
next read notices), and the next connection attempt waits for the back-off: after the
n-th failure in a row, ``delay = min(first_s · factor^(n−1), max_s)`` (:class:`Backoff`,
default 1 s doubling up to 60 s). While the back-off lasts ``read`` raises ``FeedError``
at once instead of blocking the scheduler; the first success resets it. ``close()``
releases the connection and the event loop; a later ``read`` connects again (the back-off
of earlier failures still applies).

History
-------
``supports_history`` is True when the server answers a HistoryRead (asked once per
connection, at the first use, on the standard Server object ``ns=0;i=2253``; a
``BadServiceUnsupported``, ``BadHistoryOperationUnsupported`` or ``BadNotImplemented``
answer means no). It connects if needed; while the server cannot be reached it is False
(unknown), and asked again later.
``history(tags, start, end)`` reads the raw history of each tag's node (one HistoryRead
per node, following continuation points) and returns the readings with
``start <= ts <= end``; a node the server keeps no history for adds a line to ``problems``.

Threads: the scheduler is synchronous. The feed runs its own asyncio event loop in a
private daemon thread and waits on each call for at most ``timeout_s`` plus a margin; the
methods may be called from any thread (a lock serialises them).

Reference: OPC Foundation, OPC UA Specification Part 4 (Services: Read, HistoryRead) and
Part 11 (Historical Access); status codes as named in ``asyncua.ua.StatusCodes``.

>>> feed = OpcUaFeed("plc", "opc.tcp://127.0.0.1:4840", timeout_s=2.0)
>>> feed.backoff.delay_s(1), feed.backoff.delay_s(3), feed.backoff.delay_s(30)
(1.0, 4.0, 60.0)
>>> feed.close()
"""
from __future__ import annotations

import asyncio
import concurrent.futures
import logging
import math
import threading
import time
from collections.abc import Callable, Coroutine, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any, TypeVar

from asyncua import Client, ua
from asyncua.client.ua_client import UaClientState

from db.feeds.base import Feed, FeedError, FeedReading
from ops_logic.tags import TagDef

__all__ = ["Backoff", "OpcUaFeed"]

_log = logging.getLogger(__name__)
_T = TypeVar("_T")

#: Node whose HistoryRead answer tells whether the server offers HistoryRead at all.
_SERVER_NODE = ua.NodeId(ua.ObjectIds.Server)
_NO_HISTORY = {ua.StatusCodes.BadServiceUnsupported, ua.StatusCodes.BadNotImplemented,
               ua.StatusCodes.BadHistoryOperationUnsupported,
               ua.StatusCodes.BadHistoryOperationInvalid}
_UNKNOWN_NODE = {ua.StatusCodes.BadNodeIdUnknown, ua.StatusCodes.BadNodeIdInvalid}
#: Per-value status codes that mean the connection or session is gone, not the value.
_LINK_DOWN = {ua.StatusCodes.BadSessionIdInvalid, ua.StatusCodes.BadSessionClosed,
              ua.StatusCodes.BadSessionNotActivated, ua.StatusCodes.BadSecureChannelClosed,
              ua.StatusCodes.BadSecureChannelIdInvalid, ua.StatusCodes.BadConnectionClosed,
              ua.StatusCodes.BadCommunicationError, ua.StatusCodes.BadServerHalted,
              ua.StatusCodes.BadShutdown, ua.StatusCodes.BadTimeout}
_MARGIN_S = 2.0  # extra wait over timeout_s for a call to come back from the loop thread


@dataclass(frozen=True)
class Backoff:
    """Exponential back-off between connection attempts.

    delay_n = min(first_s · factor^(n−1), max_s) after the n-th failure in a row.

    Parameters
    ----------
    first_s : float
        Delay after the first failure [s], > 0.
    factor : float
        Growth per further failure [-], ≥ 1.
    max_s : float
        Cap [s], ≥ first_s.

    >>> Backoff(0.5, 3.0, 10.0).delay_s(3)
    4.5
    >>> Backoff(0.5, 3.0, 10.0).delay_s(4)
    10.0
    """

    first_s: float = 1.0
    factor: float = 2.0
    max_s: float = 60.0

    def __post_init__(self) -> None:
        if not (math.isfinite(self.first_s) and self.first_s > 0):
            raise ValueError(f"Backoff.first_s must be > 0 s, got {self.first_s!r}")
        if not (math.isfinite(self.factor) and self.factor >= 1):
            raise ValueError(f"Backoff.factor must be >= 1, got {self.factor!r}")
        if not (math.isfinite(self.max_s) and self.max_s >= self.first_s):
            raise ValueError(f"Backoff.max_s must be >= first_s ({self.first_s} s), "
                             f"got {self.max_s!r}")

    def delay_s(self, failures: int) -> float:
        """Delay [s] after ``failures`` failures in a row (0 for none)."""
        if failures <= 0:
            return 0.0
        try:
            return min(self.first_s * self.factor ** (failures - 1), self.max_s)
        except OverflowError:
            return self.max_s


class _LoopThread:
    """An asyncio event loop running in a private daemon thread."""

    def __init__(self, name: str) -> None:
        self.loop = asyncio.new_event_loop()
        self._thread = threading.Thread(target=self._run, name=name, daemon=True)
        self._thread.start()

    def _run(self) -> None:
        asyncio.set_event_loop(self.loop)
        try:
            self.loop.run_forever()
        finally:
            pending = [t for t in asyncio.all_tasks(self.loop) if not t.done()]
            for task in pending:
                task.cancel()
            if pending:
                self.loop.run_until_complete(asyncio.gather(*pending, return_exceptions=True))
            self.loop.run_until_complete(self.loop.shutdown_asyncgens())
            self.loop.close()

    def run(self, coro: Coroutine[Any, Any, _T], timeout_s: float) -> _T:
        future = asyncio.run_coroutine_threadsafe(coro, self.loop)
        try:
            return future.result(timeout_s)
        except concurrent.futures.TimeoutError:
            future.cancel()
            raise TimeoutError(f"no answer within {timeout_s:g} s") from None

    def stop(self, timeout_s: float = 5.0) -> None:
        if self.loop.is_running():
            self.loop.call_soon_threadsafe(self.loop.stop)
        self._thread.join(timeout_s)


def _utc(when: datetime | None) -> datetime | None:
    if when is None:
        return None
    return when.replace(tzinfo=UTC) if when.tzinfo is None else when.astimezone(UTC)


def _number(value: Any) -> float | None:
    if isinstance(value, bool):
        return 1.0 if value else 0.0
    if isinstance(value, int | float):
        return float(value)
    return None


def _code(status: ua.StatusCode) -> int:
    """The status code without its info bits (the low 16 bits)."""
    return status.value & 0xFFFF0000


def _status_name(code: ua.StatusCode) -> str:
    try:
        return code.name
    except Exception:  # an unnamed vendor code
        return f"0x{code.value:08X}"


async def _close_socket(client: Client) -> None:
    client.disconnect_socket()


class OpcUaFeed(Feed):
    """Feed reading an OPC UA server; see the module docstring for the behaviour.

    Parameters
    ----------
    feed_id : str
        The feed's id in the site file.
    endpoint : str
        Server URL, ``opc.tcp://host:port[/path]``.
    timeout_s : float
        Longest wait for the server on a connection attempt or a request [s], > 0.
    backoff : Backoff
        Delays between connection attempts after failures.
    clock : callable
        Monotonic clock [s] for the back-off (tests may pass their own).
    """

    def __init__(self, feed_id: str, endpoint: str, *, timeout_s: float = 5.0,
                 backoff: Backoff | None = None,
                 clock: Callable[[], float] = time.monotonic) -> None:
        if not endpoint.startswith("opc.tcp://"):
            raise ValueError(f"feed {feed_id}: endpoint must be opc.tcp://host:port, "
                             f"got {endpoint!r}")
        if not (math.isfinite(timeout_s) and timeout_s > 0):
            raise ValueError(f"feed {feed_id}: timeout_s must be > 0 s, got {timeout_s!r}")
        self.id = feed_id
        self.endpoint = endpoint
        self.timeout_s = float(timeout_s)
        self.backoff = backoff if backoff is not None else Backoff()
        self._clock = clock
        self._lock = threading.RLock()
        self._loop: _LoopThread | None = None
        self._client: Client | None = None
        self._history: bool | None = None
        self._failures = 0
        self._retry_at = -math.inf
        self._last_error = ""
        self._warned: set[str] = set()
        self.problems: tuple[str, ...] = ()
        """What the last read or history call could not read, one line per tag."""

    # -- state ---------------------------------------------------------------------------
    @property
    def connected(self) -> bool:
        """True while a session to the server is open (as far as the client knows)."""
        client = self._client
        return client is not None and client.uaclient.state is UaClientState.CONNECTED

    @property
    def failures(self) -> int:
        """Connection failures in a row since the last success."""
        return self._failures

    @property
    def supports_history(self) -> bool:  # type: ignore[override]
        with self._lock:
            try:
                return self._history_offered(self._connect())
            except FeedError:
                return False

    # -- plumbing --------------------------------------------------------------------------
    def _run(self, coro: Coroutine[Any, Any, _T]) -> _T:
        if self._loop is None:
            self._loop = _LoopThread(f"opcua-feed-{self.id}")
        return self._loop.run(coro, self.timeout_s + _MARGIN_S)

    def _drop_client(self) -> None:
        client, self._client, self._history = self._client, None, None
        if client is None:
            return
        try:  # a live server answers CloseSession in milliseconds; a dead one never does
            self._run(asyncio.wait_for(client.disconnect(), min(self.timeout_s, 1.0)))
        except Exception as exc:
            _log.debug("feed %s: disconnect: %r; closing the socket", self.id, exc)
            try:
                self._run(_close_socket(client))
            except Exception as exc2:  # nothing more can be released
                _log.debug("feed %s: closing the socket: %r", self.id, exc2)

    def _fail(self, what: str, exc: BaseException | str) -> FeedError:
        self._drop_client()
        self._failures += 1
        delay = self.backoff.delay_s(self._failures)
        self._retry_at = self._clock() + delay
        reason = exc if isinstance(exc, str) else (f"{type(exc).__name__}: {exc}".rstrip(": ")
                                                    if str(exc) else type(exc).__name__)
        self._last_error = f"{what} {self.endpoint} failed: {reason}"
        _log.warning("feed %s: %s; next attempt in %.1f s", self.id, self._last_error, delay)
        return FeedError(f"feed {self.id}: {self._last_error} (next attempt in {delay:.1f} s)")

    def _connect(self) -> Client:
        if self._client is not None:
            return self._client
        wait = self._retry_at - self._clock()
        if wait > 0:
            raise FeedError(f"feed {self.id}: not connected, next attempt in {wait:.1f} s "
                            f"(back-off after {self._failures} failure(s)); last error: "
                            f"{self._last_error}")
        client = Client(self.endpoint, timeout=self.timeout_s, watchdog_intervall=self.timeout_s,
                        auto_reconnect=False)
        self._client = client
        try:
            self._run(asyncio.wait_for(client.connect(), self.timeout_s))
        except Exception as exc:
            raise self._fail("connecting to", exc) from exc
        _log.info("feed %s: connected to %s", self.id, self.endpoint)
        return client

    def _history_offered(self, client: Client) -> bool:
        if self._history is None:
            try:
                self._history = self._run(self._probe_history(client))
            except Exception as exc:
                raise self._fail("asking for history at", exc) from exc
            _log.info("feed %s: %s %s HistoryRead", self.id, self.endpoint,
                      "offers" if self._history else "does not offer")
        return self._history

    async def _probe_history(self, client: Client) -> bool:
        details = ua.ReadRawModifiedDetails()
        details.IsReadModified = False
        details.StartTime = datetime.now(UTC)
        details.EndTime = details.StartTime
        details.NumValuesPerNode = 1
        details.ReturnBounds = False
        try:
            result = await client.get_node(_SERVER_NODE).history_read(details)
        except ua.UaStatusCodeError as exc:
            if exc.code in _NO_HISTORY:
                return False
            raise
        return _code(result.StatusCode) not in _NO_HISTORY

    def _node_id(self, tag: TagDef) -> ua.NodeId | str:
        try:
            return ua.NodeId.from_string(tag.address)
        except Exception:
            return f"{tag.name}: address {tag.address!r} is not an OPC UA node id"

    def _problem(self, problems: list[str], tag: str, text: str) -> None:
        problems.append(text)
        if tag not in self._warned:
            self._warned.add(tag)
            _log.warning("feed %s: %s", self.id, text)

    # -- the Feed interface ----------------------------------------------------------------
    def read(self, tags: Sequence[TagDef], now: datetime) -> list[FeedReading]:
        """One bulk read of the Value attribute of every tag; see the module docstring."""
        now_utc = _utc(now)
        if now_utc is None or now.tzinfo is None:
            raise ValueError("read: now must be a timezone-aware datetime")
        with self._lock:
            client = self._connect()
            if client.uaclient.state is not UaClientState.CONNECTED:
                raise self._fail("reading from", "connection lost (noticed by the watchdog)")
            problems: list[str] = []
            ids = [self._node_id(t) for t in tags]
            asked = [(t, n) for t, n in zip(tags, ids, strict=True) if isinstance(n, ua.NodeId)]
            try:
                results = self._run(client.uaclient.read_attributes(
                    [n for _, n in asked], ua.AttributeIds.Value)) if asked else []
            except Exception as exc:
                raise self._fail("reading from", exc) from exc
            if len(results) != len(asked):
                raise self._fail("reading from", f"{len(results)} results for {len(asked)} nodes")
            down = [r.StatusCode for r in results if _code(r.StatusCode) in _LINK_DOWN]
            if down and len(down) == len(results):
                raise self._fail("reading from", f"every value {_status_name(down[0])}")
            self._failures, self._retry_at = 0, -math.inf
            by_tag = dict(zip((t.name for t, _ in asked), results, strict=True))
            out = []
            for tag, node in zip(tags, ids, strict=True):
                if isinstance(node, str):
                    self._problem(problems, tag.name, node)
                    out.append(FeedReading(tag.name, now_utc, math.nan, source_ok=False))
                    continue
                out.append(self._reading(tag, by_tag[tag.name], now_utc, problems))
            self.problems = tuple(problems)
            return out

    def _reading(self, tag: TagDef, dv: ua.DataValue, now: datetime,
                 problems: list[str]) -> FeedReading:
        status = dv.StatusCode if dv.StatusCode is not None else ua.StatusCode()
        ts = _utc(dv.SourceTimestamp) or _utc(dv.ServerTimestamp) or now
        raw = dv.Value.Value if dv.Value is not None else None
        value = _number(raw)
        if _code(status) in _UNKNOWN_NODE:
            self._problem(problems, tag.name, f"{tag.name}: address {tag.address} unknown to "
                          f"the server ({_status_name(status)})")
            return FeedReading(tag.name, now, math.nan, source_ok=False)
        if value is None:
            if raw is not None:
                self._problem(problems, tag.name, f"{tag.name}: node {tag.address} holds a "
                              f"{type(raw).__name__}, not a number")
            return FeedReading(tag.name, ts, math.nan, source_ok=False)
        return FeedReading(tag.name, ts, value, source_ok=status.is_good())

    def history(self, tags: Sequence[TagDef], start: datetime, end: datetime
                ) -> list[FeedReading]:
        """Raw history of every tag between ``start`` and ``end`` (inclusive)."""
        if start.tzinfo is None or end.tzinfo is None:
            raise ValueError("history: start and end must be timezone-aware datetimes")
        start_utc, end_utc = _utc(start), _utc(end)
        assert start_utc is not None and end_utc is not None
        if end_utc < start_utc:
            raise ValueError(f"history: end {end_utc} is before start {start_utc}")
        with self._lock:
            client = self._connect()
            if not self._history_offered(client):
                self.problems = (f"the server at {self.endpoint} offers no HistoryRead",)
                return []
            problems: list[str] = []
            out: list[FeedReading] = []
            for tag in tags:
                node = self._node_id(tag)
                if isinstance(node, str):
                    self._problem(problems, tag.name, node)
                    continue
                try:
                    values = self._run(client.get_node(node).read_raw_history(
                        start_utc, end_utc, return_bounds=False))
                except ua.UaStatusCodeError as exc:
                    if exc.code in _LINK_DOWN:
                        raise self._fail("reading history from", exc) from exc
                    problems.append(f"{tag.name}: no history for {tag.address} "
                                    f"({_status_name(ua.StatusCode(exc.code))})")
                    continue
                except Exception as exc:
                    raise self._fail("reading history from", exc) from exc
                for dv in values:
                    reading = self._reading(tag, dv, start_utc, problems)
                    if start_utc <= reading.ts <= end_utc:
                        out.append(reading)
            self._failures, self._retry_at = 0, -math.inf
            self.problems = tuple(problems)
            return out

    def close(self) -> None:
        """Close the session and stop the private event loop (a later read reconnects)."""
        with self._lock:
            if self._loop is None:
                return
            self._drop_client()
            self._loop.stop()
            self._loop = None
