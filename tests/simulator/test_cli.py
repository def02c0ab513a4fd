"""``fishway simulate``: bad input exits 2 naming the option; a short run serves and stops."""
from __future__ import annotations

import asyncio
import threading
import time

import pytest
from asyncua import Client

from dashboard.cli import main
from ops_logic.site import load_site
from simulator.link import free_port


@pytest.mark.parametrize(("args", "option"), [
    (["--opcua", "opc.tcp://10.1.2.3:4840"], "--opcua"),
    (["--opcua", "tcp://127.0.0.1:4840"], "--opcua"),
    (["--speed", "0"], "--speed"),
    (["--duration", "-1"], "--duration"),
    (["--seed", "-3"], "--seed"),
    (["--start", "yesterday"], "--start"),
    (["--start", "2026-06-01T00:00:00"], "--start"),
    (["--history-db", "/no/such/folder/h.db"], "--history-db"),
])
def test_bad_input_exits_2_with_one_line_naming_the_option(capsys, args, option):
    assert main(["simulate", *args]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith(f"fishway simulate: {option}")


def test_several_problems_give_one_line_each(capsys):
    assert main(["simulate", "--speed", "-1", "--duration", "0"]) == 2
    assert len(capsys.readouterr().err.strip().splitlines()) == 2


def test_a_bad_site_file_exits_2(tmp_path, capsys):
    bad = tmp_path / "site.toml"
    bad.write_text("[site]\nunits = 'si'\n")
    assert main(["simulate", str(bad), "--duration", "1"]) == 2
    assert str(bad) in capsys.readouterr().err


def test_a_short_run_serves_the_demo_site_and_stops(tmp_path, capsys):
    port = free_port()
    url = f"opc.tcp://127.0.0.1:{port}"
    seen = {}

    def client():
        async def go():
            for _ in range(100):
                try:
                    async with Client(url, timeout=2) as c:
                        seen["forebay"] = await c.get_node("ns=2;i=1000").read_value()
                        return
                except (OSError, TimeoutError):
                    await asyncio.sleep(0.1)
        asyncio.run(go())

    t = threading.Thread(target=client, daemon=True)
    t.start()
    t0 = time.monotonic()
    code = main(["simulate", "--opcua", url, "--speed", "60", "--seed", "2",
                 "--duration", "3", "--history-db", str(tmp_path / "history.db")])
    t.join(5.0)
    assert code == 0
    assert 3.0 <= time.monotonic() - t0 < 20.0
    assert 70.0 < seen["forebay"] < 80.0  # the demo forebay range is 76.8-77.9 m
    assert (tmp_path / "history.db").stat().st_size > 0
    assert load_site(None).site.name in capsys.readouterr().err
