"""The rider's screen: content, staleness flags, layout limits, the non-blocking sink."""

from __future__ import annotations

import threading

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from livecoach.errors import ConfigError
from livecoach.pipeline.state import LiveState, Notice, SensorHealth
from livecoach.sinks.display import (
    LIVE_FILL,
    SPEED_UNITS,
    STALE_FILL,
    DisplaySink,
    big_text_lines,
    error_bar,
    power_bar,
    render_lines,
    render_text,
)

# Invented demo values (no real rider or vehicle).
SENSORS_OK = (
    SensorHealth("ble.csc", True, False, 0.3, 1200, 2, 0, 0.0),
    SensorHealth("ble.cycling_power", True, False, 0.2, 1180, 0, 0, 0.0),
    SensorHealth("ble.heart_rate", True, False, 0.5, 600, 0, 0, 0.0),
    SensorHealth("serial.gps", True, False, 0.1, 300, 0, 0, 0.0),
)


def make_state(**changes) -> LiveState:
    base = dict(
        t_s=512.3, phase="runup", distance_m=4210.0, distance_to_trap_m=2290.0,
        speed_mps=23.47, speed_stale=False, power_w=342.0, power_stale=False,
        cadence_rpm=96.0, heart_rate_bpm=168.0, target_power_w=335.0, planned_speed_mps=23.1,
        cue="hold", cue_text="hold 335 watts", predicted_trap_speed_mps=24.9,
        planned_trap_speed_mps=25.05, w_prime_balance_j=11800.0, w_prime_j=18000.0,
        cda_m2=0.0312, cda_sd_m2=0.0011, crr=0.00362, crr_sd=0.00021, sensors=SENSORS_OK,
    )
    base.update(changes)
    return LiveState(**base)


def digit_rows(text: str, scale: int = 1, fill: str = LIVE_FILL) -> list[str]:
    return [r.rstrip() for r in big_text_lines(text, scale, scale, fill=fill)]


@pytest.mark.parametrize("width,height", [(50, 16), (100, 30)])
def test_screen_shows_every_reading(width, height):
    text = render_text(make_state(), width, height)
    lines = text.splitlines()
    assert len(lines) <= height
    assert all(len(line) <= width for line in lines)
    # 23.47 m/s = 84.5 km/h (1 km/h = 1/3.6 m/s, exact by definition of the SI units).
    scale = 2 if width >= 80 else 1
    for row in digit_rows("84.5", scale):
        assert row in text
    assert "km/h" in text
    assert "HOLD 335 WATTS" in text                    # the cue
    assert "342 W" in text and "target 335 W" in text   # power against target
    assert "+7" in text                                 # 342 - 335
    assert "to trap 2.29 km" in text                    # distance to the trap
    assert "pred 89.6 km/h" in text                     # 24.9 m/s predicted trap speed
    assert "11.8 kJ" in text and "66%" in text          # W' left: 11800 / 18000
    assert "CdA 0.0312 ±0.0022 2σ" in text              # CdA with its 2-sigma error bar
    assert "●" in text and "├" in text
    for label in ("WHL ok", "PWR ok", "HR ok", "GPS ok"):
        assert label in text
    assert "STALE" not in text


def test_stale_speed_is_never_drawn_as_current():
    state = make_state(
        speed_stale=True,
        sensors=(SensorHealth("ble.csc", True, True, 6.2, 100, 0, 1, 6.2),
                 SensorHealth("ble.cycling_power", True, False, 0.2, 100, 0, 0, 0.0),
                 # A current channel's age must not be shown as the stale speed's age.
                 SensorHealth("serial.gps", True, False, 0.1, 100, 0, 0, 0.0)),
    )
    for width, height in ((50, 16), (100, 30)):
        text = render_text(state, width, height)
        scale = 2 if width >= 80 else 1
        # The digits are drawn shaded, never in the solid live fill.
        for row in digit_rows("84.5", scale, STALE_FILL):
            assert row in text
        assert digit_rows("84.5", scale)[0] not in text
        assert "STALE 6s" in text                        # age of the last wheel value
        header = text.splitlines()[0]
        assert "to trap 2.29 km" in header and "STALE" in header
        assert "pred 89.6 km/h  STALE" in text           # derived from speed
        assert "WHL STALE 6s" in text
        assert "inputs stale" in text                    # the cue is based on old data
    ansi = render_text(state, 50, 16, ansi=True)
    # grey42 is colour 242 of the xterm 256-colour palette: the digits are dimmed.
    assert "\x1b[38;5;242m" + STALE_FILL in ansi


def test_stale_power_flags_power_wprime_and_cadence():
    state = make_state(
        power_stale=True,
        sensors=(SensorHealth("ble.csc", True, False, 0.2, 100, 0, 0, 0.0),
                 SensorHealth("ble.cycling_power", False, True, 4.4, 100, 3, 1, 4.4)),
    )
    small = render_text(state, 50, 16)
    assert "PWR 342 W  STALE 4s" in small
    assert "+7" not in small                              # no deviation from a stale value
    assert "PWR DOWN" in small                            # link down beats stale
    wline = next(line for line in small.splitlines() if line.startswith("W′"))
    assert "STALE" in wline
    big = render_text(state, 100, 30)
    assert "CAD 96 rpm  STALE" in big
    for row in digit_rows("342", 1, STALE_FILL):
        assert row in big
    assert "rej 3" in big


def test_unknown_values_show_dashes_not_zeros():
    text = render_text(LiveState(t_s=0.0), 50, 16)
    assert "--.-" not in text  # the block font draws dashes, not the characters
    assert digit_rows("--.-", fill=STALE_FILL)[2] in text  # no speed yet counts as stale
    assert "STALE" not in text  # ... but there is no old value to flag
    assert "PWR -- W" in text and "target -- W" in text
    assert "no cue" in text
    assert "no sensor heard yet" in text
    assert "READY" in text


@pytest.mark.parametrize("unit,expected", [("km/h", "84.5"), ("mph", "52.5"), ("m/s", "23.5")])
def test_speed_units(unit, expected):
    # 1 mph = 0.44704 m/s exactly (international mile, 1959 agreement): 23.47 / 0.44704 = 52.50.
    text = render_text(make_state(), 50, 16, speed_unit=unit)
    for row in digit_rows(expected):
        assert row in text
    unit_line = next(line for line in text.splitlines() if digit_rows(expected)[0] in line)
    assert line_ends_with_unit(unit_line, unit)
    assert SPEED_UNITS["mph"] == pytest.approx(1 / 0.44704)


def test_bad_unit_is_a_config_error():
    with pytest.raises(ConfigError, match="speed unit 'knots'"):
        render_text(make_state(), 50, 16, speed_unit="knots")
    with pytest.raises(ConfigError, match="refresh_hz"):
        DisplaySink(refresh_hz=0.0)


def test_trap_and_finish_headers():
    inside = render_text(make_state(phase="trap", distance_to_trap_m=-120.0), 50, 16)
    assert inside.splitlines()[0].startswith(" IN TRAP ") and "120 m" in inside
    done = render_text(make_state(phase="done", trap_speed_mps=25.0, trap_entry_t_s=600.0,
                                  trap_exit_t_s=608.0), 50, 16)
    # 200 m in 8.000 s = 25.00 m/s = 90.00 km/h.
    assert "trap 90.00 km/h  8.000 s" in done.splitlines()[0]


def test_banner_and_alarms_take_a_line():
    alarm = make_state(alarms=("drag changed: CdA +0.0030 m2",))
    assert "! drag changed: CdA +0.0030 m2" in render_text(alarm, 50, 16)
    warn = Notice(500.0, "warning", "serial.gps stale: no valid value")
    text = render_text(make_state(), 50, 16, banner=warn)
    assert text.splitlines()[1].strip().startswith("! serial.gps stale")
    assert len(text.splitlines()) <= 16


def test_bars():
    assert power_bar(335.0, 335.0, 11) == "·····┃·····"
    # 25 % below target fills the whole left half; 12.5 % above fills half of the right.
    assert power_bar(251.25, 335.0, 11) == "█████┃·····"
    assert power_bar(376.875, 335.0, 11) == "·····┃██···"
    assert power_bar(None, 335.0, 11) == "·····┃·····"
    bar = error_bar(0.030, 0.00075, 21)  # 2 sigma = 5 % of 0.030 = 1/5 of the 25 % span
    assert bar.index("●") == 10 and bar.count("━") == 4 and "├" in bar and "┤" in bar
    assert error_bar(0.030, 0.1, 21).startswith("◀")
    assert error_bar(None, None, 21).strip() == ""


states = st.builds(
    make_state,
    speed_mps=st.one_of(st.none(), st.floats(0, 60)),
    speed_stale=st.booleans(),
    power_w=st.one_of(st.none(), st.floats(0, 2500)),
    power_stale=st.booleans(),
    target_power_w=st.one_of(st.none(), st.floats(1, 1500)),
    distance_to_trap_m=st.one_of(st.none(), st.floats(-300, 50000)),
    w_prime_balance_j=st.one_of(st.none(), st.floats(-5000, 40000)),
    cda_sd_m2=st.one_of(st.none(), st.floats(0, 1)),
    cue_text=st.one_of(st.none(), st.text(max_size=80)),
    alarms=st.lists(st.text(max_size=120), max_size=2).map(tuple),
)


@settings(max_examples=40, deadline=None)
@given(state=states, width=st.integers(50, 100), height=st.integers(16, 30))
def test_any_state_fits_the_screen(state, width, height):
    lines = render_lines(state, width, height)
    assert len(lines) <= height
    assert all(t.cell_len <= width for t in lines)
    if state.speed_stale and state.speed_mps is not None:
        assert any("STALE" in t.plain for t in lines[:8])


class _ThreadRecordingFile:
    """A terminal stand-in that notes which thread writes to it."""

    def __init__(self) -> None:
        self.writer_threads: set[str] = set()
        self.text: list[str] = []
        self.lock = threading.Lock()

    def write(self, s: str) -> int:
        with self.lock:
            self.writer_threads.add(threading.current_thread().name)
            self.text.append(s)
        return len(s)

    def flush(self) -> None:
        pass

    def isatty(self) -> bool:
        return True


def test_sink_draws_only_from_its_own_thread():
    from rich.console import Console

    out = _ThreadRecordingFile()
    console = Console(file=out, width=50, height=16, force_terminal=True, color_system=None)
    sink = DisplaySink(console, refresh_hz=20.0, screen=False)
    for i in range(200):  # the event loop's calls: no drawing happens here
        sink.on_state(make_state(t_s=float(i)))
    assert out.text == []
    sink.start_thread()
    done = threading.Event()

    def wait_frames() -> None:
        while sink.frames_drawn < 3:
            done.wait(0.02)
        done.set()

    waiter = threading.Thread(target=wait_frames, daemon=True)
    waiter.start()
    assert done.wait(10.0), "the display thread drew no frames"
    sink.stop_thread()
    assert out.writer_threads == {"livecoach-display"}
    assert sink.errors == 0
    assert "HOLD 335 WATTS" in "".join(out.text)


def test_banner_expires_on_the_sink_clock():
    now = [100.0]
    sink = DisplaySink(refresh_hz=5.0, banner_s=4.0, clock=lambda: now[0])
    sink.on_state(make_state())
    sink.on_notice(Notice(1.0, "cue", "hold"))  # cues are not banners
    assert sink.current_banner() is None
    sink.on_notice(Notice(2.0, "warning", "ble.csc stale: no valid value"))
    assert sink.current_banner().text.startswith("ble.csc stale")
    now[0] = 104.5
    assert sink.current_banner() is None


def line_ends_with_unit(line: str, unit: str) -> bool:
    return line.rstrip().endswith(unit)
