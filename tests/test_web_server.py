"""The crew page server: HTTP routes, read-only, local-only assets, the
WebSocket protocol (hello + merged updates), throttling and slow pages."""

from __future__ import annotations

import asyncio
import base64
import json
import os
import re
import socket
from importlib import resources
from types import SimpleNamespace

import pytest
from aiohttp.test_utils import TestClient, TestServer

from livecoach.cli.commands.init import example_ride_text
from livecoach.config.ridefile import parse_ride_text
from livecoach.errors import ConfigError, SinkError
from livecoach.pipeline.state import LiveState, Notice, SensorHealth
from livecoach.sinks.web import CrewWebSink
from livecoach.web.feed import POINT_FIELDS, CrewFeed, plan_payload

RIDE = parse_ride_text(example_ride_text(), "example ride")
STATIC = resources.files("livecoach.web").joinpath("static")


def _state(i: int, dt_s: float = 0.1) -> LiveState:
    return LiveState(
        t_s=i * dt_s, phase="runup", distance_m=2.0 * i, distance_to_trap_m=6500.0 - 2.0 * i,
        speed_mps=20.0 + 0.001 * i, speed_stale=False, power_w=400.0, power_stale=(i % 50 == 7),
        cda_m2=0.03, cda_sd_m2=0.002, crr=0.0035, crr_sd=0.0003, cue="steady",
        sensors=(SensorHealth("ble.csc", True, False, 0.2, i, 0, 0, 0.0),),
    )


def run(coro):
    return asyncio.run(asyncio.wait_for(coro, 60))


async def _client(sink: CrewWebSink) -> TestClient:
    client = TestClient(TestServer(sink.make_app()))
    await client.start_server()
    sink.start_ticker()
    return client


# ------------------------------------------------------------------ the page
def test_page_and_assets_are_served_with_a_strict_policy():
    async def go():
        sink = CrewWebSink(RIDE, rate_hz=5)
        client = await _client(sink)
        try:
            r = await client.get("/")
            assert r.status == 200 and r.headers["Content-Type"].startswith("text/html")
            csp = r.headers["Content-Security-Policy"]
            assert "default-src 'none'" in csp and "script-src 'self'" in csp and "connect-src 'self'" in csp
            html = await r.text()
            refs = re.findall(r'(?:src|href)="([^"]+)"', html)
            assert refs and all(ref.startswith("/static/") for ref in refs)
            for ref in refs:
                rr = await client.get(ref)
                assert rr.status == 200, ref
            icon = await client.get("/favicon.ico")
            assert icon.status == 200 and icon.headers["Content-Type"] == "image/svg+xml"
            assert (await client.get("/static/nothing.js")).status == 404
            assert (await client.get("/static/..%2Fsinks%2Fweb.py")).status == 404
        finally:
            await client.close()
            await sink.stop()

    run(go())


def test_assets_load_nothing_from_outside():
    # Every file the page is made of: no absolute URL to anywhere (no CDN, fonts, scripts).
    for entry in STATIC.iterdir():
        text = entry.read_text(encoding="utf-8")
        text = text.replace('xmlns="http://www.w3.org/2000/svg"', "")  # a namespace name, not a load
        urls = re.findall(r"(?:https?:)?//[A-Za-z0-9.-]+\.[A-Za-z]{2,}", text)
        assert urls == [], (entry.name, urls)
        assert "@import" not in text and "@font-face" not in text


def test_read_only_no_route_accepts_changes():
    async def go():
        sink = CrewWebSink(RIDE)
        client = await _client(sink)
        try:
            for path in ("/", "/api/plan", "/api/state", "/api/ride", "/api/status", "/ws"):
                for method in ("POST", "PUT", "DELETE", "PATCH"):
                    r = await client.request(method, path, data=b"{}")
                    assert r.status == 405, (method, path)
        finally:
            await client.close()
            await sink.stop()

    run(go())


def test_plan_ride_and_state_json():
    from livecoach.plan import make_plan

    plan = make_plan(RIDE)

    async def go():
        sink = CrewWebSink(RIDE, plan)
        for i in range(30):
            sink.on_state(_state(i))
        sink.on_notice(Notice(1.0, "cue", "settle in", {"cue": "steady"}))
        client = await _client(sink)
        try:
            got = await (await client.get("/api/plan")).json()
            assert got["distance_m"] == pytest.approx(list(plan.distance_m), rel=1e-6)
            assert got["speed_mps"] == pytest.approx(list(plan.speed_mps), rel=1e-5)
            assert got["power_w"] == pytest.approx(list(plan.power_w), rel=1e-5)
            assert got["trap_speed_mps"] == pytest.approx(plan.trap_speed_mps, rel=1e-5)
            ride = await (await client.get("/api/ride")).json()
            assert ride["trap_entry_m"] == 6500.0 and ride["trap_exit_m"] == 6700.0
            assert ride["w_prime_j"] == 18000.0 and ride["prior_cda_m2"] == 0.03
            snap = await (await client.get("/api/state")).json()
            assert snap["fields"] == list(POINT_FIELDS)
            assert snap["state"]["t_s"] == pytest.approx(2.9) and snap["state"]["speed_kmh"] == pytest.approx(72.1044)
            assert len(snap["points"]) == 6  # one point per 0.5 s of module time
            assert snap["notices"][0]["text"] == "settle in"
            sink.set_plan(None)
            assert await (await client.get("/api/plan")).json() is None
        finally:
            await client.close()
            await sink.stop()

    run(go())


def test_plan_payload_thins_long_plans_and_keeps_the_end():
    n = 10001
    plan = SimpleNamespace(distance_m=[i * 0.7 for i in range(n)], speed_mps=[10.0] * n,
                           power_w=[300.0] * n)
    out = plan_payload(plan, max_points=1500)
    assert len(out["distance_m"]) <= 1501 and out["distance_m"][-1] == pytest.approx(7000.0)
    bad = SimpleNamespace(distance_m=[0.0, 1.0], speed_mps=[1.0], power_w=[1.0, 2.0])
    with pytest.raises(SinkError, match="plan arrays differ in length"):
        CrewWebSink(RIDE, bad)


def test_non_finite_numbers_become_null():
    feed = CrewFeed()
    feed.add_state(LiveState(t_s=0.0, speed_mps=float("nan"), speed_stale=False, cda_m2=float("inf")))
    text = json.dumps(feed.snapshot(), allow_nan=False)
    assert "NaN" not in text and "Infinity" not in text


# ------------------------------------------------------------------ settings
def test_settings_come_from_the_ride_file_and_default_to_this_board_only():
    assert CrewWebSink(RIDE).host == "127.0.0.1"
    ride = parse_ride_text(example_ride_text() + '\n[web]\nhost = "0.0.0.0"\nport = 9123\nrate_hz = 2\n')
    sink = CrewWebSink(ride)
    assert (sink.host, sink.port, sink.period_s) == ("0.0.0.0", 9123, 0.5)
    with pytest.raises(ConfigError, match=r"\[web\] port = 70000"):
        parse_ride_text(example_ride_text() + "\n[web]\nport = 70000\n")


def test_a_port_in_use_is_a_clear_error():
    async def go():
        with socket.socket() as s:
            s.bind(("127.0.0.1", 0))
            s.listen()
            port = s.getsockname()[1]
            sink = CrewWebSink(RIDE, port=port)
            with pytest.raises(SinkError, match=f"cannot listen on 127.0.0.1:{port}: the port is in use"):
                await sink.start()

    run(go())


def test_start_binds_a_real_socket_on_loopback():
    async def go():
        sink = CrewWebSink(RIDE, port=0)
        await sink.start()
        try:
            assert sink.port > 0 and sink.url == f"http://127.0.0.1:{sink.port}/"
            reader, writer = await asyncio.open_connection("127.0.0.1", sink.port)
            writer.write(b"GET /api/status HTTP/1.0\r\nHost: x\r\n\r\n")
            data = await reader.read()
            writer.close()
            assert data.split(b" ")[1] == b"200" and b'"clients":0' in data
        finally:
            await sink.stop()

    run(go())


# ----------------------------------------------------------------- WebSocket
def test_websocket_hello_then_updates_with_every_point_once_and_throttled():
    async def go():
        sink = CrewWebSink(RIDE, rate_hz=5)
        for i in range(20):
            sink.on_state(_state(i))
        client = await _client(sink)
        try:
            ws = await client.ws_connect("/ws")
            hello = await ws.receive_json(timeout=5)
            assert hello["type"] == "hello" and hello["state"]["t_s"] == pytest.approx(1.9)
            points = list(hello["points"])
            updates = []
            # the pipeline: 1000 states at 500 Hz (2 s), a notice every 0.5 s
            for i in range(20, 1020):
                sink.on_state(_state(i))
                if i % 250 == 0:
                    sink.on_notice(Notice(i * 0.1, "warning", f"note {i}"))
                await asyncio.sleep(0.002)
            await asyncio.sleep(0.5)
            while True:
                try:
                    msg = await ws.receive_json(timeout=0.5)
                except asyncio.TimeoutError:
                    break
                updates.append(msg)
            await ws.close()
        finally:
            await client.close()
            await sink.stop()
        assert all(u["type"] == "update" for u in updates)
        # throttled to a few Hz: ~2.5 s of feeding at 5 Hz, never one per state
        assert 5 <= len(updates) <= 20
        for u in updates:
            points += u["points"]
        t = [p[0] for p in points]
        assert t == sorted(t) and len(t) == len(set(t))  # every point once, in order
        assert len(points) == 1020 // 5  # one per 0.5 s of module time
        assert [n["text"] for u in updates for n in u["notices"]] == ["note 250", "note 500", "note 750",
                                                                     "note 1000"]
        assert updates[-1]["state"]["t_s"] == pytest.approx(101.9)
        stale = [p for p in points if p[POINT_FIELDS.index("power_w")] is None]
        assert stale == []  # i % 50 == 7 never falls on a kept point at 0.5 s steps
    run(go())


def test_stale_values_are_left_out_of_the_chart_history():
    feed = CrewFeed(point_every_s=0.0)
    feed.add_state(LiveState(t_s=1.0, speed_mps=12.0, speed_stale=True, power_w=300.0, power_stale=False))
    p = feed.snapshot()["points"][0]
    assert p[POINT_FIELDS.index("speed_mps")] is None and p[POINT_FIELDS.index("power_w")] == 300.0


def test_what_a_page_sends_is_ignored():
    async def go():
        sink = CrewWebSink(RIDE, rate_hz=10)
        client = await _client(sink)
        try:
            ws = await client.ws_connect("/ws")
            await ws.receive_json(timeout=5)
            await ws.send_str('{"set_target_power_w": 900}')
            await ws.send_bytes(b"\x00\x01")
            sink.on_state(_state(1))
            msg = await ws.receive_json(timeout=5)
            assert msg["type"] == "update" and msg["state"]["target_power_w"] is None
            await ws.close()
        finally:
            await client.close()
            await sink.stop()

    run(go())


def _raw_websocket_that_never_reads(port: int) -> socket.socket:
    s = socket.socket()
    s.setsockopt(socket.SOL_SOCKET, socket.SO_RCVBUF, 4096)
    s.connect(("127.0.0.1", port))
    key = base64.b64encode(os.urandom(16)).decode()
    s.sendall(
        f"GET /ws HTTP/1.1\r\nHost: 127.0.0.1:{port}\r\nUpgrade: websocket\r\nConnection: Upgrade\r\n"
        f"Sec-WebSocket-Key: {key}\r\nSec-WebSocket-Version: 13\r\n\r\n".encode()
    )
    return s


def test_a_page_that_stops_reading_is_cut_off_without_slowing_the_others():
    async def go():
        # a long cue log: the hello alone is 9 MB, more than the kernel's socket buffers hold
        sink = CrewWebSink(RIDE, port=0, rate_hz=5, send_timeout_s=1.0,
                           feed=CrewFeed(max_notices=3000))
        for i in range(3000):
            sink.on_notice(Notice(i * 0.1, "warning", f"{i:04d}" + "x" * 3000))
        for i in range(100):
            sink.on_state(_state(i, dt_s=0.5))
        await sink.start()
        stuck = _raw_websocket_that_never_reads(sink.port)
        try:
            from aiohttp import ClientSession

            async with ClientSession() as session:
                async with session.ws_connect(f"http://127.0.0.1:{sink.port}/ws",
                                              max_msg_size=0) as ws:  # a second, healthy page
                    hello = await ws.receive_json(timeout=10)
                    assert hello["type"] == "hello" and len(hello["notices"]) == 3000
                    got = 0
                    loop = asyncio.get_running_loop()
                    t0 = loop.time()
                    i = 100
                    while loop.time() - t0 < 3.0:
                        sink.on_state(_state(i, dt_s=0.5))
                        i += 1
                        try:
                            await ws.receive_json(timeout=0.05)
                            got += 1
                        except asyncio.TimeoutError:
                            pass
            # the healthy page kept getting ~5 updates per second all along
            assert got >= 10
            assert sink.clients_dropped == 1  # the stuck page was cut off after its send timeout
        finally:
            stuck.close()
            await sink.stop()

    run(go())
