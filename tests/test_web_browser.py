"""The crew page end to end in real headless Chromium (Debian package `chromium`).

A simulated ride (the bench simulator's "faults" scenario, the real pipeline
in closed loop with the coach) feeds the web sink from a background task on
the server's asyncio loop while Chromium, driven over the DevTools protocol,
shows the page. Checks: the page loads without a script error or a blocked
load, updates while the ride runs, flags a stale sensor as stale, ends on
the ride's final numbers with the plan and the ridden track charted, and a
screenshot is a non-blank PNG.

Run this file as a script to refresh the README picture:
    .venv/bin/python tests/test_web_browser.py docs/images/web-crew-page.png
"""

from __future__ import annotations

import asyncio
import base64
import io
import json
import os
import shutil
import sys
import tempfile
from pathlib import Path
from typing import Any

import pytest

pytestmark = pytest.mark.slow

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
CHROMIUM_FLAGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
    "--no-first-run", "--no-default-browser-check", "--hide-scrollbars", "--mute-audio",
    "--remote-debugging-address=127.0.0.1", "--remote-debugging-port=0", "--window-size=1280,900",
]


class DevTools:
    """A Chromium process and one page, driven over the DevTools protocol (aiohttp WebSocket)."""

    def __init__(self, profile_dir: Path) -> None:
        self.profile_dir = profile_dir
        self.proc: asyncio.subprocess.Process | None = None
        self.session: Any = None
        self.ws: Any = None
        self._ids = 0
        self._waiting: dict[int, asyncio.Future] = {}
        self.events: list[dict] = []
        self._reader: asyncio.Task | None = None

    async def start(self) -> None:
        import aiohttp

        self.proc = await asyncio.create_subprocess_exec(
            CHROMIUM, *CHROMIUM_FLAGS, f"--user-data-dir={self.profile_dir}", "about:blank",
            stdout=asyncio.subprocess.DEVNULL, stderr=asyncio.subprocess.DEVNULL,
        )
        port_file = self.profile_dir / "DevToolsActivePort"
        for _ in range(300):
            if port_file.is_file() and port_file.read_text().count("\n") >= 1:
                break
            if self.proc.returncode is not None:
                raise RuntimeError(f"chromium exited with code {self.proc.returncode}")
            await asyncio.sleep(0.1)
        port = int(port_file.read_text().splitlines()[0])
        self.session = aiohttp.ClientSession()
        async with self.session.get(f"http://127.0.0.1:{port}/json/list") as r:
            targets = await r.json(content_type=None)
        page = next(t for t in targets if t.get("type") == "page")
        self.ws = await self.session.ws_connect(page["webSocketDebuggerUrl"], max_msg_size=0)
        self._reader = asyncio.create_task(self._read())
        for domain in ("Page", "Runtime", "Log"):
            await self.call(f"{domain}.enable")

    async def _read(self) -> None:
        async for msg in self.ws:
            data = json.loads(msg.data)
            fut = self._waiting.pop(data.get("id"), None)
            if fut is not None and not fut.done():
                fut.set_result(data)
            elif "method" in data:
                self.events.append(data)

    async def call(self, method: str, **params: Any) -> dict:
        self._ids += 1
        fut = asyncio.get_running_loop().create_future()
        self._waiting[self._ids] = fut
        await self.ws.send_str(json.dumps({"id": self._ids, "method": method, "params": params}))
        reply = await asyncio.wait_for(fut, 30)
        if "error" in reply:
            raise RuntimeError(f"{method}: {reply['error']}")
        return reply.get("result", {})

    async def evaluate(self, expression: str) -> Any:
        res = await self.call("Runtime.evaluate", expression=expression, returnByValue=True)
        if "exceptionDetails" in res:
            raise RuntimeError(f"page script failed: {res['exceptionDetails']}")
        return res["result"].get("value")

    async def wait_for(self, expression: str, timeout_s: float = 20.0) -> Any:
        loop = asyncio.get_running_loop()
        end = loop.time() + timeout_s
        value = None
        while loop.time() < end:
            value = await self.evaluate(expression)
            if value:
                return value
            await asyncio.sleep(0.1)
        raise AssertionError(f"the page never satisfied {expression!r} (last value {value!r})")

    def problems(self) -> list[str]:
        """Script exceptions, console errors and blocked loads the page reported."""
        out = []
        for ev in self.events:
            m, p = ev["method"], ev.get("params", {})
            if m == "Runtime.exceptionThrown":
                out.append("exception: " + json.dumps(p.get("exceptionDetails", {}))[:300])
            elif m == "Runtime.consoleAPICalled" and p.get("type") in ("error", "assert"):
                out.append("console: " + json.dumps(p.get("args", []))[:300])
            elif m == "Log.entryAdded" and p.get("entry", {}).get("level") == "error":
                out.append("log: " + p["entry"].get("text", "")[:300])
        return out

    async def screenshot(self) -> bytes:
        height = await self.evaluate("document.documentElement.scrollHeight")
        await self.call("Emulation.setDeviceMetricsOverride", width=1280, height=int(height),
                        deviceScaleFactor=1, mobile=False)
        await asyncio.sleep(0.5)  # let the charts redraw at the new size
        res = await self.call("Page.captureScreenshot", format="png")
        return base64.b64decode(res["data"])

    async def close(self) -> None:
        if self._reader is not None:
            self._reader.cancel()
        if self.ws is not None:
            await self.ws.close()
        if self.session is not None:
            await self.session.close()
        if self.proc is not None and self.proc.returncode is None:
            self.proc.terminate()
            try:
                await asyncio.wait_for(self.proc.wait(), 10)
            except asyncio.TimeoutError:
                self.proc.kill()
                await self.proc.wait()


class SinkTap:
    """The simulator's closed-loop controller: the pipeline, with every result
    handed to the sink as the live loop does."""

    def __init__(self, pipeline: Any, sink: Any) -> None:
        self.pipeline = pipeline
        self.sink = sink
        self.last = None

    def feed(self, event: Any) -> Any:
        result = self.pipeline.feed(event)
        for notice in result.notices:
            self.sink.on_notice(notice)
        self.sink.on_state(result.state)
        self.last = result
        return result


async def ride_in_background(events: Any, tap: SinkTap, pause_at_s: list[float],
                             paused: asyncio.Queue, resume: asyncio.Event,
                             stop_at_s: float | None) -> None:
    """Step the simulation on the loop, a few events at a time; wait at each
    pause time; end at ``stop_at_s`` of ride time (None: the end of the run)."""
    pauses = list(pause_at_s)
    for k, _ in enumerate(events):
        if stop_at_s is not None and tap.last is not None and tap.last.state.t_s >= stop_at_s:
            break
        if pauses and tap.last is not None and tap.last.state.t_s >= pauses[0]:
            pauses.pop(0)
            resume.clear()
            await paused.put(tap.last.state)
            await resume.wait()
        if k % 25 == 0:
            await asyncio.sleep(0.003)  # let the server and the page's updates run
    await paused.put(None)


async def crew_page_session(workdir: Path, screenshot_path: Path | None = None,
                            stop_at_s: float | None = None) -> dict:
    from livecoach.pipeline.processor import Pipeline
    from livecoach.plan import make_plan
    from livecoach.sinks.web import CrewWebSink
    from sim.run import as_scenario
    from sim.engine import Simulation

    scenario = as_scenario("faults")
    ride = scenario.ride
    plan = make_plan(ride)
    sink = CrewWebSink(ride, plan, host="127.0.0.1", port=0, rate_hz=4)
    await sink.start()
    browser = DevTools(workdir / "profile")
    out: dict = {}
    try:
        await browser.start()
        await browser.call("Page.navigate", url=sink.url)
        await browser.wait_for("document.body && document.body.dataset.link === 'live'")
        await browser.wait_for("document.body.dataset.planPoints !== '0'")
        out["plan_points"] = int(await browser.evaluate("document.body.dataset.planPoints"))

        tap = SinkTap(Pipeline(ride, plan, keep_for_batch=False), sink)
        sim = Simulation(scenario, None, tap, keep_truth=False)
        paused: asyncio.Queue = asyncio.Queue()
        resume = asyncio.Event()
        # power dropout 30-34 s; wheel-sensor disconnect 55-61 s (sim/scenarios/faults.toml)
        rider = asyncio.create_task(ride_in_background(sim.events(), tap, [33.5, 59.0], paused, resume,
                                                       stop_at_s))
        updates = []
        # 1) the power meter has dropped out: its tile is flagged stale
        st = await asyncio.wait_for(paused.get(), 120)
        out["power_state_stale"] = st.power_stale
        await browser.wait_for(f"document.getElementById('v-dist').textContent === '{st.distance_m:.0f}'")
        out["power_tile_stale"] = await browser.evaluate(
            "document.getElementById('t-power').classList.contains('stale')")
        updates.append(int(await browser.evaluate("document.body.dataset.updates")))
        resume.set()
        # 2) the wheel sensor's link is down: its row in the sensor table says so
        st = await asyncio.wait_for(paused.get(), 120)
        await browser.wait_for(f"document.getElementById('v-dist').textContent === '{st.distance_m:.0f}'")
        out["wheel_row"] = await browser.evaluate(
            "(() => { const r = document.querySelector('#sensor-table tr[data-channel=\"ble.csc\"]');"
            " return r ? [r.className, r.cells[1].textContent] : null; })()")
        out["wheel_health"] = [(h.link_up, h.stale) for h in st.sensors if h.channel == "ble.csc"]
        updates.append(int(await browser.evaluate("document.body.dataset.updates")))
        resume.set()
        # 3) the end of the ride
        assert await asyncio.wait_for(paused.get(), 300) is None
        await rider
        final = tap.last.state
        out["final"] = final
        await browser.wait_for(f"document.getElementById('phase').dataset.phase === '{final.phase}'")
        await browser.wait_for(f"document.getElementById('v-dist').textContent === '{final.distance_m:.0f}'")
        updates.append(int(await browser.evaluate("document.body.dataset.updates")))
        out["updates"] = updates
        out["dom"] = await browser.evaluate("""(() => {
            const t = (id) => document.getElementById(id).textContent;
            return {speed: t('v-speed'), speed_ms: t('v-speed-ms'), power: t('v-power'),
                    cda: t('v-cda'), crr: t('v-crr'), trapspeed: t('v-trapspeed'), cue: t('v-cue'),
                    vehicle: t('ride-vehicle'), phase: t('phase'),
                    log: document.querySelectorAll('#cue-log li').length,
                    log_kinds: [...new Set([...document.querySelectorAll('#cue-log li')].map(li => li.className))],
                    sensors: document.querySelectorAll('#sensor-table tbody tr').length,
                    points: Number(document.body.dataset.points),
                    canvas_px: [...document.querySelectorAll('canvas')].map(c => c.width * c.height)};
        })()""")
        out["notices"] = len(sink.feed.snapshot()["notices"])
        out["png"] = await browser.screenshot()
        out["problems"] = browser.problems()
        if screenshot_path is not None:
            screenshot_path.write_bytes(out["png"])
    finally:
        await browser.close()
        await sink.stop()
    return out


def _needs_chromium() -> None:
    if CHROMIUM is None:
        pytest.skip("chromium is not installed and could not be installed here "
                    "(Debian package 'chromium'; .ci/run installs it when missing)")


def test_crew_page_in_headless_chromium_follows_a_simulated_ride(tmp_path):
    _needs_chromium()
    from PIL import Image

    # The first 75 s of the run: both sensor faults and the start of the run-up
    # (the full run costs the simulator several CPU seconds more; the README
    # picture below runs to the end).
    out = asyncio.run(asyncio.wait_for(crew_page_session(tmp_path, stop_at_s=75.0), 600))

    assert out["problems"] == []  # no script error, no load blocked by the page's policy
    assert out["plan_points"] == 276 or out["plan_points"] > 50
    # the page updated while the ride was running, at every stage
    u = out["updates"]
    assert u[0] > 3 and u[1] > u[0] and u[2] > u[1]
    # stale data is flagged, never shown as current
    assert out["power_state_stale"] and out["power_tile_stale"]
    assert out["wheel_health"] and out["wheel_row"] is not None
    link_up, stale = out["wheel_health"][0]
    if not link_up:
        assert "down" in out["wheel_row"][0] and out["wheel_row"][1] == "link down"
    else:
        assert stale and "stale" in out["wheel_row"][0]
    # the final numbers are the ride's
    final = out["final"]
    dom = out["dom"]
    assert final.phase == "runup" and final.t_s >= 75.0
    assert dom["phase"] == "run-up" and dom["vehicle"].startswith("Sable Dart")
    assert dom["speed"] == f"{final.speed_mps * 3.6:.1f}" and dom["speed_ms"] == f"{final.speed_mps:.2f}"
    assert dom["cda"] == f"{final.cda_m2:.4f}" and dom["crr"] == f"{final.crr:.5f}"
    assert dom["power"] == f"{final.power_w:.0f}" and dom["cue"] == final.cue
    assert final.trap_speed_mps is None and dom["trapspeed"] == "–"  # not timed yet
    assert dom["log"] == min(out["notices"], 200) and dom["log"] > 3 and "warning" in dom["log_kinds"]
    assert dom["sensors"] == len(final.sensors)
    assert dom["points"] > 100 and all(px > 0 for px in dom["canvas_px"])
    # the screenshot is a real, non-blank picture
    png = out["png"]
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    img = Image.open(io.BytesIO(png)).convert("RGB")
    assert img.width == 1280 and img.height > 900
    colours = img.getcolors(maxcolors=1 << 20)
    assert colours is not None and len(colours) > 200
    background = max(colours)[0] / (img.width * img.height)
    assert background < 0.9


if __name__ == "__main__":
    target = Path(sys.argv[1] if len(sys.argv) > 1 else "docs/images/web-crew-page.png")
    if CHROMIUM is None:
        sys.exit("chromium is not installed (Debian package 'chromium')")
    with tempfile.TemporaryDirectory() as tmp:
        result = asyncio.run(crew_page_session(Path(tmp), target))
    print(f"wrote {target} ({len(result['png'])} bytes); page problems: {result['problems'] or 'none'}")
    os._exit(0)
