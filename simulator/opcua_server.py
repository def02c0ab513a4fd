"""The simulated plant as an OPC UA (IEC 62541) server, on the async ``asyncua`` API.

Address space (namespace :data:`NAMESPACE_URI`, registered so that its index is the one of the
site's tag addresses, 2 by default):

- one folder per fishway (string node id ``ns=2;s=<fishway>``) holding one ``Double`` variable
  per tag at the tag's address (``ns=2;i=1000+n`` from :func:`ops_logic.tags.site_tags`),
  browse name = tag name, value = the engineering value in SI (the tag's unit, also in the
  node's description), source timestamp = plant time. A reading the plant marks bad
  (a dropout) is published with status ``BadSensorFailure``; during a scheduled
  communications outage of the plant every node is ``BadNoCommunication``.
- for every actuator position tag, a writable ``Double`` node ``<tag>.setpoint`` at
  ``i = <tag's id> + SETPOINT_OFFSET``: writing it commands the actuator (the position tag then
  moves at the actuator's rate); a value outside the actuator's range, or a fractional pump
  count, is refused with ``BadOutOfRange``. The node shows the commanded value.

Every tag and setpoint node is historized (``historize_node_data_change``) in the in-memory store
(or in SQLite with ``history_db``; numeric node ids, as that store needs), so a client can
HistoryRead what the plant measured while it was away. Plant time runs at ``speed`` times real
time from the plant's start (source timestamps run ahead of the wall clock when ``speed > 1``).
The server binds only to loopback unless ``allow_remote=True``.
"""

from __future__ import annotations

import asyncio
import contextlib
import ipaddress
import logging
import threading
import time
from collections.abc import Callable
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any
from urllib.parse import urlparse

from asyncua import Server, ua
from asyncua.server.history_sql import HistorySQLite

from ops_logic.ladder import SettingError
from ops_logic.site import Site
from ops_logic.tags import TagDef
from simulator.plant import Plant
from simulator.scenario import Scenario

__all__ = [
    "NAMESPACE_URI",
    "SETPOINT_OFFSET",
    "ServerHandle",
    "check_endpoint",
    "run_server_in_thread",
    "serve",
    "setpoint_nodeid",
]

NAMESPACE_URI = "urn:fishway-ops:simulated-plant"
SETPOINT_OFFSET = 100_000
"""Numeric id offset of a position tag's ``.setpoint`` node."""

_log = logging.getLogger(__name__)


def check_endpoint(endpoint: str, allow_remote: bool = False) -> tuple[str, int]:
    """Host and port of an ``opc.tcp://host:port`` endpoint; a host that is not loopback is
    refused unless ``allow_remote``.

    >>> check_endpoint("opc.tcp://127.0.0.1:4840")
    ('127.0.0.1', 4840)
    """
    u = urlparse(endpoint)
    if u.scheme != "opc.tcp" or not u.hostname:
        raise ValueError(f"endpoint must look like opc.tcp://127.0.0.1:4840, got {endpoint!r}")
    try:
        port = u.port
    except ValueError:
        port = None
    if port is None or not 0 < port < 65536:
        raise ValueError(f"endpoint {endpoint!r} needs a port number (1–65535)")
    host = u.hostname
    if not allow_remote:
        try:
            loopback = host == "localhost" or ipaddress.ip_address(host).is_loopback
        except ValueError:
            loopback = False
        if not loopback:
            raise ValueError(f"endpoint host {host!r} is not loopback: the simulator binds to "
                             "127.0.0.1 unless remote access is allowed explicitly")
    return host, port


def setpoint_nodeid(tag: TagDef) -> ua.NodeId:
    """Node id of a position tag's writable setpoint node."""
    nid = ua.NodeId.from_string(tag.address)
    if not isinstance(nid.Identifier, int):
        raise ValueError(f"tag {tag.name}: setpoint nodes need a numeric address, got "
                         f"{tag.address!r}")
    return ua.NodeId(nid.Identifier + SETPOINT_OFFSET, nid.NamespaceIndex)


class _Published:
    def __init__(self, plant: Plant, clock: Callable[[], datetime]):
        self.plant = plant
        self.clock = clock
        self.tags = list(plant.tags)
        self.nodeids = {t.name: ua.NodeId.from_string(t.address) for t in self.tags}
        self.setpoints = {t.name: setpoint_nodeid(t) for t in self.tags if t.role == "setting"}
        self.internal = False
        self.shown: dict[str, float] = {}

    def setter(self, tag: TagDef) -> Callable[[Any, ua.AttributeIds, ua.DataValue], None]:
        def write(node: Any, attr: ua.AttributeIds, dv: ua.DataValue) -> None:
            if not self.internal:
                value = dv.Value.Value if dv.Value is not None else None
                if not isinstance(value, int | float) or isinstance(value, bool):
                    raise ua.UaStatusCodeError(ua.StatusCodes.BadTypeMismatch)
                try:
                    at = max(self.clock(), self.plant.now)
                    self.plant.apply_setting(tag.fishway_id, tag.setting or "", float(value), at)
                except SettingError as exc:
                    _log.warning("setpoint %s refused: %s", tag.name, exc)
                    raise ua.UaStatusCodeError(ua.StatusCodes.BadOutOfRange) from None
                _log.info("setpoint %s = %g", tag.name, value)
                self.shown[tag.name] = float(value)
            node.attributes[attr].value = dv
        return write


async def _build(server: Server, pub: _Published, site: Site) -> list[Any]:
    needed = max(n.NamespaceIndex for n in pub.nodeids.values())
    idx = first = await server.register_namespace(NAMESPACE_URI)
    while idx < needed:
        idx = await server.register_namespace(f"{NAMESPACE_URI}:{idx + 1}")
    objects = server.get_objects_node()
    folders = {f.id: await objects.add_folder(ua.NodeId(f.id, first),
                                              ua.QualifiedName(f.id, first))
               for f in site.fishways}
    nodes = []
    for tag in pub.tags:
        nid = pub.nodeids[tag.name]
        folder = folders[tag.fishway_id]
        node = await folder.add_variable(nid, ua.QualifiedName(tag.name, nid.NamespaceIndex),
                                         0.0, ua.VariantType.Double)
        await node.write_attribute(ua.AttributeIds.Description, ua.DataValue(ua.Variant(
            ua.LocalizedText(f"{tag.quantity} [{tag.unit}]"), ua.VariantType.LocalizedText)))
        nodes.append(node)
        if tag.name in pub.setpoints:
            sid = pub.setpoints[tag.name]
            sp = await folder.add_variable(
                sid, ua.QualifiedName(f"{tag.name}.setpoint", sid.NamespaceIndex),
                float(pub.plant.setpoints(tag.fishway_id)[tag.setting or ""]),
                ua.VariantType.Double)
            await sp.set_writable()
            server.set_attribute_value_setter(sid, pub.setter(tag))
            nodes.append(sp)
    return nodes


async def _publish(server: Server, pub: _Published, t: datetime) -> None:
    plant = pub.plant

    def step() -> tuple[list[Any], bool, dict[str, float]]:
        readings = plant.sample(pub.tags, t)
        commanded = {}
        for f in plant.site.fishways:
            for name, v in plant.setpoints(f.id).items():
                commanded[f"{f.id}.{name}"] = v
        return readings, plant.in_outage(t), commanded

    readings, outage, commanded = await asyncio.to_thread(step)
    now = datetime.now(UTC)
    for r in readings:
        if outage:
            status = ua.StatusCode(ua.StatusCodes.BadNoCommunication)
        elif r.source_ok:
            status = ua.StatusCode(ua.StatusCodes.Good)
        else:
            status = ua.StatusCode(ua.StatusCodes.BadSensorFailure)
        value = ua.Variant(r.value, ua.VariantType.Double) if status.is_good() else None
        await server.write_attribute_value(pub.nodeids[r.tag], ua.DataValue(
            value, status, SourceTimestamp=r.ts, ServerTimestamp=now))
    pub.internal = True
    try:
        for tag in pub.tags:
            if tag.name not in pub.setpoints:
                continue
            v = commanded[f"{tag.fishway_id}.{tag.setting}"]
            if pub.shown.get(tag.name) != v:
                pub.shown[tag.name] = v
                await server.write_attribute_value(pub.setpoints[tag.name], ua.DataValue(
                    ua.Variant(v, ua.VariantType.Double), SourceTimestamp=t,
                    ServerTimestamp=now))
    finally:
        pub.internal = False


async def serve(site: Site, endpoint: str = "opc.tcp://127.0.0.1:4840", *, speed: float = 1.0,
                seed: int = 0, ready: asyncio.Event | None = None, plant: Plant | None = None,
                start: datetime | None = None, scenario: Scenario | None = None,
                update_s: float = 1.0, history_count: int = 10_000,
                history_db: str | Path | None = None, allow_remote: bool = False,
                stop: asyncio.Event | None = None) -> None:
    """Serve the plant until cancelled (or ``stop`` is set); see the module docstring.

    ``plant`` (default: a new :class:`Plant` of ``site`` from ``start``, default now, with
    ``seed`` and ``scenario``) is advanced to ``plant.start + speed × elapsed real time`` every
    ``update_s`` seconds and every tag is published. ``ready`` is set once clients can connect.
    History keeps the last ``history_count`` values of each node (each about 320 bytes in the
    memory store: 10 000 values of the demo site's 35 tags take about 110 MB, and cover 2.8 h
    of 1-s updates).
    """
    host, port = check_endpoint(endpoint, allow_remote)
    if not 0.0 < speed <= 100_000.0:
        raise ValueError(f"speed must be within (0, 100000], got {speed}")
    if not 0.01 <= update_s <= 60.0:
        raise ValueError(f"update_s must be within 0.01–60 s, got {update_s}")
    if plant is None:
        t0 = start or datetime.now(UTC).replace(microsecond=0)
        plant = Plant(site, start=t0, seed=seed, scenario=scenario)
    origin, mono0 = plant.now, time.monotonic()

    def clock() -> datetime:
        s = round(speed * (time.monotonic() - mono0), 3)
        return origin + timedelta(seconds=s)

    server = Server()
    await server.init()
    server.set_endpoint(f"opc.tcp://{host}:{port}/")
    server.set_server_name(f"fishway-ops simulated plant: {site.site.name}")
    server.set_security_policy([ua.SecurityPolicyType.NoSecurity])
    if history_db is not None:
        storage = HistorySQLite(str(history_db))
        await storage.init()
        server.iserver.history_manager.set_storage(storage)
    pub = _Published(plant, clock)
    nodes = await _build(server, pub, site)
    await _publish(server, pub, clock())  # first values before history starts recording
    await server.historize_node_data_change(nodes, period=None, count=history_count)
    await server.start()
    try:
        _log.info("serving %d tags of %s at %s (speed ×%g)", len(pub.tags), site.site.name,
                  endpoint, speed)
        if ready is not None:
            ready.set()
        stop = stop or asyncio.Event()
        while not stop.is_set():
            with contextlib.suppress(TimeoutError):
                await asyncio.wait_for(stop.wait(), update_s)
            await _publish(server, pub, clock())
    finally:
        await server.stop()


class ServerHandle:
    """A server running in a background thread; :meth:`stop` ends it (also on ``with`` exit)."""

    def __init__(self, plant: Plant, endpoint: str):
        self.plant = plant
        self.endpoint = endpoint
        self.loop: asyncio.AbstractEventLoop | None = None
        self._stop: asyncio.Event | None = None
        self._thread: threading.Thread | None = None
        self.error: BaseException | None = None

    def stop(self, timeout: float = 10.0) -> None:
        """Stop the server and wait for its thread."""
        if self.loop is not None and self._stop is not None and self.loop.is_running():
            self.loop.call_soon_threadsafe(self._stop.set)
        if self._thread is not None:
            self._thread.join(timeout)

    def __enter__(self) -> ServerHandle:
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()


def run_server_in_thread(site: Site, endpoint: str, *, speed: float = 1.0, seed: int = 0,
                         start: datetime | None = None, scenario: Scenario | None = None,
                         plant: Plant | None = None, timeout_s: float = 20.0,
                         **kwargs: Any) -> ServerHandle:
    """Start :func:`serve` in a daemon thread; return once it accepts clients (or raise what
    stopped it). ``handle.plant`` is the plant being served (thread-safe)."""
    check_endpoint(endpoint, kwargs.get("allow_remote", False))
    if plant is None:
        plant = Plant(site, start=start or datetime.now(UTC).replace(microsecond=0), seed=seed,
                      scenario=scenario)
    handle = ServerHandle(plant, endpoint)
    started = threading.Event()

    async def main() -> None:
        handle.loop = asyncio.get_running_loop()
        handle._stop = asyncio.Event()
        ready = asyncio.Event()
        task = asyncio.create_task(serve(site, endpoint, speed=speed, plant=plant, ready=ready,
                                         stop=handle._stop, **kwargs))
        waiter = asyncio.create_task(ready.wait())
        await asyncio.wait({task, waiter}, return_when=asyncio.FIRST_COMPLETED)
        if task.done():  # it stopped before it was ready: report why
            waiter.cancel()
            handle.error = task.exception() or RuntimeError("the server stopped at once")
            started.set()
            return
        started.set()
        await task

    def run() -> None:
        try:
            asyncio.run(main())
        except BaseException as exc:  # reported to the caller or kept on the handle
            handle.error = exc
        finally:
            started.set()

    handle._thread = threading.Thread(target=run, name="opcua-sim", daemon=True)
    handle._thread.start()
    if not started.wait(timeout_s):
        handle.stop()
        raise TimeoutError(f"the OPC UA server at {endpoint} did not start in {timeout_s:g} s")
    if handle.error is not None:
        handle.stop()
        raise handle.error
    return handle
