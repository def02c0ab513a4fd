"""The OPC UA server: values, history, setpoints and a cut link, read with an asyncua client.

The reference for every value is the plant itself (`plant.sample` at the node's source
timestamp: the plant is deterministic, so the served value must match within its noise).
"""
from __future__ import annotations

import asyncio
import time
from datetime import UTC, datetime, timedelta

import pytest
from asyncua import Client, ua

from simulator.faults import NOISE_SIGMA
from simulator.link import FaultyLink, free_port
from simulator.opcua_server import (
    SETPOINT_OFFSET,
    check_endpoint,
    run_server_in_thread,
    setpoint_nodeid,
)
from simulator.scenario import Scenario

SPEED = 5.0


@pytest.fixture(scope="module")
def server(site):
    port = free_port()
    handle = run_server_in_thread(site, f"opc.tcp://127.0.0.1:{port}", speed=SPEED,
                                  update_s=0.1, seed=3,
                                  scenario=Scenario(random_forebay_drops_per_day=0.0))
    handle.port = port
    yield handle
    handle.stop()
    assert handle.error is None


def _run(coro):
    return asyncio.run(asyncio.wait_for(coro, 30.0))


def _tag(server, name):
    return server.plant.tag(name)


def _within_noise(server, tag, value, ts):
    expected = server.plant.sample([tag], ts)[0].value
    sigma = NOISE_SIGMA.get(tag.quantity, 0.0) + (0.005 * abs(expected)
                                                  if tag.quantity == "flow" else 0.0)
    return abs(value - expected) <= 4.0 * sigma + 1e-9


def test_every_tag_is_published_at_its_address_with_plant_values(server):
    tags = server.plant.tags

    async def go():
        async with Client(server.endpoint, timeout=5) as c:
            nodes = [c.get_node(t.address) for t in tags]
            dvs = await c.read_attributes(nodes)
            names = [(await n.read_browse_name()).Name for n in nodes[:5]]
            return dvs, names

    dvs, names = _run(go())
    assert names == [t.name for t in tags[:5]]
    for tag, dv in zip(tags, dvs, strict=True):
        assert dv.StatusCode.is_good(), tag.name
        ts = dv.SourceTimestamp.replace(tzinfo=UTC)
        assert ts >= server.plant.start
        assert _within_noise(server, tag, dv.Value.Value, ts), tag.name


def test_history_read_returns_what_the_plant_measured(server):
    tag = _tag(server, "east.P01.level")
    time.sleep(1.0)

    async def go():
        async with Client(server.endpoint, timeout=5) as c:
            end = server.plant.now + timedelta(seconds=1)
            return await c.get_node(tag.address).read_raw_history(server.plant.start, end)

    hist = _run(go())
    assert len(hist) >= 5
    stamps = [dv.SourceTimestamp.replace(tzinfo=UTC) for dv in hist]
    assert stamps == sorted(stamps)
    for dv, ts in zip(hist[:10], stamps, strict=False):
        assert _within_noise(server, tag, dv.Value.Value, ts)


def test_writing_a_setpoint_moves_the_position(server):
    crest = _tag(server, "east.exit.crest")
    pumps = _tag(server, "east.PS1.pumps")

    async def go():
        async with Client(server.endpoint, timeout=5) as c:
            sp, pos = c.get_node(setpoint_nodeid(crest)), c.get_node(crest.address)
            target = round(await pos.read_value(), 3) - 0.05
            await sp.write_value(target)
            await asyncio.sleep(1.0)  # 0.05 m at 0.03 m/s is under 2 s of plant time
            moved, shown = await pos.read_value(), await sp.read_value()
            refusals = []
            for node, bad in ((sp, 99.0), (c.get_node(setpoint_nodeid(pumps)), 1.5)):
                try:
                    await node.write_value(bad)
                except ua.UaStatusCodeError as exc:
                    refusals.append(exc.code)
            return target, moved, shown, refusals

    target, moved, shown, refusals = _run(go())
    assert moved == pytest.approx(target, abs=0.004)  # position noise is 1 mm
    assert shown == target
    assert server.plant.setpoints("east")["exit_crest_m"] == pytest.approx(target, abs=1e-12)
    assert refusals == [ua.StatusCodes.BadOutOfRange] * 2
    assert setpoint_nodeid(crest).Identifier == 1012 + SETPOINT_OFFSET


def test_dropout_and_plant_outage_show_as_bad_status(server):
    tag = _tag(server, "west.do")
    now = server.plant.now

    async def read(c):
        await asyncio.sleep(0.5)
        return await c.get_node(tag.address).read_data_value(raise_on_bad_status=False)

    async def go():
        async with Client(server.endpoint, timeout=5) as c:
            server.plant.inject_fault(tag.name, "dropout", now, now + timedelta(hours=1))
            dropout = await read(c)
            server.plant.end_fault(tag.name, "dropout", server.plant.now)
            server.plant.inject_fault("*", "outage", server.plant.now,
                                      server.plant.now + timedelta(hours=1))
            outage = await read(c)
            server.plant.end_fault("*", "outage", server.plant.now)
            back = await read(c)
            return dropout, outage, back

    dropout, outage, back = _run(go())
    assert dropout.StatusCode.value == ua.StatusCodes.BadSensorFailure
    assert outage.StatusCode.value == ua.StatusCodes.BadNoCommunication
    assert back.StatusCode.is_good()


def test_a_cut_link_fails_the_client_and_the_server_keeps_history(server):
    tag = _tag(server, "east.forebay_level")

    async def go(link):
        async with Client(f"opc.tcp://127.0.0.1:{link.port}", timeout=2) as c:
            first = await c.get_node(tag.address).read_value()
            cut_at = server.plant.now
            link.cut()
            failures = 0
            try:
                await c.get_node(tag.address).read_value()
            except Exception:  # the connection was reset: the exact type is asyncua's
                failures += 1
            try:
                await asyncio.wait_for(Client(f"opc.tcp://127.0.0.1:{link.port}",
                                              timeout=1).connect(), 3.0)
            except (OSError, TimeoutError):
                failures += 1
            await asyncio.sleep(1.0)
            back_at = server.plant.now
            link.restore()
        async with Client(f"opc.tcp://127.0.0.1:{link.port}", timeout=2) as c:
            node = c.get_node(tag.address)
            again = await node.read_value()
            hist = await node.read_raw_history(cut_at, back_at)
        return first, failures, again, hist

    with FaultyLink(0, server.port, lifetime_s=60.0) as link:
        first, failures, again, hist = _run(go(link))
    assert failures == 2
    assert isinstance(first, float) and isinstance(again, float)
    assert len(hist) >= 3  # recorded while the link was cut, ready for a backfill


@pytest.mark.parametrize(("endpoint", "message"), [
    ("opc.tcp://10.20.30.40:4840", "not loopback"), ("http://127.0.0.1:4840", "opc.tcp"),
    ("opc.tcp://127.0.0.1", "port")])
def test_endpoints_bind_to_loopback_only(endpoint, message):
    with pytest.raises(ValueError, match=message):
        check_endpoint(endpoint)
    assert check_endpoint("opc.tcp://10.20.30.40:4840", allow_remote=True)[1] == 4840


def test_a_port_in_use_is_reported(site, server):
    with pytest.raises(OSError):
        run_server_in_thread(site, server.endpoint, start=datetime.now(UTC), timeout_s=20.0)
