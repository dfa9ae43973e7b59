"""The decode layer: :class:`RawEvent` payloads -> samples (pure, deterministic).

Each channel's payload goes through its codec (``livecoach.codecs``) and
becomes zero or more samples of :mod:`livecoach.stream.samples`:

=================  ==================================================================
channel            samples
=================  ==================================================================
ble.cycling_power  PowerSample; WheelSample (source "power") from wheel data;
                   CadenceSample from crank data
ble.csc            WheelSample (source "csc"); CadenceSample from crank data
ble.heart_rate     HeartRateSample
serial.gps         GpsSample (RMC, GGA, VTG; other sentences are ignored)
serial.mcu         AirSample, WheelSample (source "mcu"), MarkerSample; a hello
                   record resets the microcontroller's counters
link               LinkSample
control            MarkerSample ("marker [label]")
tick               nothing
=================  ==================================================================

What cannot be used becomes a :class:`Rejected` sample with a reason
``"<kind>: <detail>"`` and is counted per channel (:meth:`Decoder.stats`);
the decoder never raises on a payload. State is kept only for rollover
unwrapping of counters and event times, duplicate notifications and time
going backwards, so a replay of the same events gives the same samples.

A frozen sensor repeats its last payload byte for byte. Where a repeat
cannot be new data it is rejected as ``frozen``, so the channel goes stale
and is flagged like a silent one: a GPS sentence or a microcontroller line
(each carries the sensor's own clock, so the same bytes again mean the clock
stopped; beyond ``duplicate_window_s``), and a power-meter report with
non-zero power unchanged for longer than ``[decode] frozen_after_s`` (a
coasting meter legitimately repeats its zero-power report; a pedalling one
changes its crank event time at least once per crank revolution). Wheel and
heart-rate payloads legitimately repeat (stopped wheel, steady heart rate).

When several wheel sources report, one is used at a time (``[decode]
wheel_source``, default ``auto``: the CSC sensor, else the microcontroller's
hall sensor, else the power meter's wheel data; a source silent for longer
than ``wheel_failover_s`` hands over to the next one that reports).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Callable

from livecoach.codecs._errors import OUT_OF_RANGE, UNSUPPORTED, PayloadError
from livecoach.codecs.csc import decode_csc
from livecoach.codecs.csc import TICKS_PER_S as CSC_TICKS_PER_S
from livecoach.codecs.cycling_power import (
    CRANK_TICKS_PER_S,
    FLAG_ACCUMULATED_TORQUE_CRANK,
    WHEEL_TICKS_PER_S,
    decode_cycling_power,
)
from livecoach.codecs.heart_rate import decode_heart_rate
from livecoach.codecs.mcu_line import McuAir, McuButton, McuHello, McuWheel, decode_mcu_line
from livecoach.codecs.mcu_line import TICKS_PER_S as MCU_TICKS_PER_S
from livecoach.codecs.nmea import decode_nmea
from livecoach.codecs.revolutions import CounterUnwrapper, RevolutionTracker
from livecoach.config.schema import setting
from livecoach.errors import LivecoachError
from livecoach.stream.builders import positional_builder
from livecoach.stream.events import (
    CH_CONTROL,
    CH_CSC,
    CH_GPS,
    CH_HEART_RATE,
    CH_LINK,
    CH_MCU,
    CH_POWER,
    CH_TICK,
    RawEvent,
)
from livecoach.stream.samples import (
    AirSample,
    CadenceSample,
    HeartRateSample,
    LinkSample,
    MarkerSample,
    PowerSample,
    Rejected,
    WheelSample,
)

if TYPE_CHECKING:
    from livecoach.config.ridefile import RideConfig

#: Reason kinds the decode layer adds to the codecs' own.
DUPLICATE = "duplicate notification"
TIME_BACKWARDS = "time went backwards"
UNKNOWN_CHANNEL = "unknown channel"
FROZEN = "frozen"

WHEEL_SOURCES = ("csc", "mcu", "power")
LINK_STATES = ("up", "down", "reconnecting")
_TWO_PI = 2.0 * math.pi

# The samples made once or more per event, built by position (field order of
# livecoach.stream.samples; every field given).
_wheel_sample = positional_builder(WheelSample)        # t_s, revolutions, event time, source
_cadence_sample = positional_builder(CadenceSample)    # t_s, cadence_rpm
_power_sample = positional_builder(PowerSample)        # t_s, power, crank revs, crank t, energy, balance
_heart_rate_sample = positional_builder(HeartRateSample)  # t_s, bpm, rr intervals
_air_sample = positional_builder(AirSample)            # t_s, air speed, pressure, temperature, humidity


@dataclass(frozen=True, kw_only=True)
class DecodeConfig:
    """[decode]: how raw payloads become samples."""

    wheel_source: str = setting(
        "auto", doc="which wheel sensor gives speed and distance (auto: csc, else mcu, else power)",
        choices=("auto", *WHEEL_SOURCES),
    )
    wheel_failover_s: float = setting(
        5.0, doc="in auto mode, a wheel source silent this long hands over to the next", unit="s",
        lo=0.5, hi=120.0,
    )
    duplicate_window_s: float = setting(
        0.05, doc="a byte-identical payload on the same channel within this time is a duplicate",
        unit="s", lo=0.0, hi=1.0,
    )
    cadence_stop_s: float = setting(
        3.0, doc="no new crank revolution for this long means cadence 0", unit="s", lo=0.5, hi=30.0,
    )
    max_power_w: float = setting(
        3000.0, doc="reported power above this is rejected as implausible", unit="W", lo=100.0, hi=10000.0,
    )
    min_power_w: float = setting(
        -200.0, doc="reported power below this is rejected (small negatives occur when back-pedalling)",
        unit="W", lo=-2000.0, hi=0.0,
    )
    frozen_after_s: float = setting(
        2.0, doc="a power meter repeating the same non-zero report this long is frozen (its reports "
                 "are rejected until they change)", unit="s", lo=0.5, hi=60.0,
    )
    max_cadence_rpm: float = setting(250.0, doc="higher cadence is rejected", unit="rpm", lo=60.0, hi=1000.0)
    min_heart_rate_bpm: float = setting(25.0, doc="lower heart rate is rejected", unit="1/min", lo=0.0, hi=100.0)
    max_heart_rate_bpm: float = setting(250.0, doc="higher heart rate is rejected", unit="1/min", lo=100.0, hi=400.0)


@dataclass(slots=True)
class ChannelStats:
    """Counters of one channel: payloads seen, accepted (gave at least one
    usable sample), rejected samples by reason kind, ignored payloads."""

    payloads: int = 0
    accepted: int = 0
    rejected: int = 0
    ignored: int = 0
    reasons: dict[str, int] | None = None

    def as_dict(self) -> dict[str, Any]:
        return {
            "payloads": self.payloads,
            "accepted": self.accepted,
            "rejected": self.rejected,
            "ignored": self.ignored,
            "reasons": dict(sorted((self.reasons or {}).items())),
        }


def _decode_config(ride: "RideConfig | None") -> DecodeConfig:
    if ride is None:
        return DecodeConfig()
    try:
        cfg = ride.section("decode")
    except LivecoachError:  # a ride-file module without the [decode] registration
        return DecodeConfig()
    return cfg if isinstance(cfg, DecodeConfig) else DecodeConfig()


class Decoder:
    """Turns raw events into samples; see the module docstring.

    ``ride``: the ride configuration (the ``[decode]`` section, if any, is
    used; None gives the defaults). ``feed`` never raises on bad payloads.
    """

    def __init__(self, ride: "RideConfig | None" = None, config: DecodeConfig | None = None) -> None:
        self.config = config if config is not None else _decode_config(ride)
        c = self.config
        self._dup_window_s = c.duplicate_window_s
        self._stats: dict[str, ChannelStats] = {}
        self._last: dict[str, tuple[float, bytes]] = {}
        self._same_since: dict[str, float] = {}
        self._wheel = {
            "csc": RevolutionTracker(32, CSC_TICKS_PER_S),
            "power": RevolutionTracker(32, WHEEL_TICKS_PER_S),
            "mcu": RevolutionTracker(32, MCU_TICKS_PER_S, time_bits=32),
        }
        self._wheel_last_rx: dict[str, float] = {}
        self._wheel_active: str | None = None if c.wheel_source == "auto" else c.wheel_source
        self._crank = {"csc": RevolutionTracker(16, CRANK_TICKS_PER_S), "power": RevolutionTracker(16, CRANK_TICKS_PER_S)}
        self._torque = CounterUnwrapper(16)
        self._handlers: dict[str, Callable[[float, bytes], list[Any]]] = {
            CH_POWER: self._power,
            CH_CSC: self._csc,
            CH_HEART_RATE: self._heart_rate,
            CH_GPS: self._gps,
            CH_MCU: self._mcu,
            CH_LINK: self._link,
            CH_CONTROL: self._control,
        }

    # ------------------------------------------------------------------ public
    def feed(self, event: RawEvent) -> list[Any]:
        """Decode one event into samples (possibly none); never raises on bad payloads."""
        channel = event.channel
        if channel == CH_TICK:
            return []
        st = self._stats.get(channel)
        if st is None:
            st = self._stats[channel] = ChannelStats(reasons={})
        st.payloads += 1
        t_s = event.t_s
        payload = event.payload
        handler = self._handlers.get(channel)
        if handler is None:
            return self._reject(st, t_s, channel, UNKNOWN_CHANNEL, f"'{channel}' is not a known channel")
        if not isinstance(t_s, (int, float)) or not math.isfinite(t_s):
            return self._reject(st, t_s, channel, TIME_BACKWARDS, f"receive time {t_s!r} is not finite")
        if not isinstance(payload, (bytes, bytearray)):
            return self._reject(st, t_s, channel, "malformed", f"payload is {type(payload).__name__}, not bytes")
        last = self._last.get(channel)
        same = False
        if last is not None:
            last_t, last_payload = last
            if t_s < last_t:
                return self._reject(st, t_s, channel, TIME_BACKWARDS,
                                    f"receive time {t_s:.6f} s is before the previous {last_t:.6f} s")
            same = payload == last_payload
            if same and t_s - last_t <= self._dup_window_s and channel not in (CH_LINK, CH_CONTROL):
                return self._reject(st, t_s, channel, DUPLICATE,
                                    f"same {len(payload)} bytes again after {t_s - last_t:.3f} s")
        self._last[channel] = (t_s, bytes(payload))
        if not same:
            self._same_since[channel] = t_s
        try:
            out = handler(t_s, payload)
        except PayloadError as exc:
            return self._reject(st, t_s, channel, exc.kind, exc.detail)
        if same and out and channel in (CH_GPS, CH_MCU, CH_POWER):
            since = self._same_since[channel]
            if self._frozen(channel, t_s - since, out):
                return self._reject(st, t_s, channel, FROZEN,
                                    f"the same {len(payload)} bytes since t = {since:.3f} s "
                                    f"({t_s - since:.1f} s): the sensor is not updating")
        if not out:
            st.ignored += 1
            return out
        good = False
        for s in out:
            if type(s) is Rejected:
                st.rejected += 1
                kind = s.reason.split(":", 1)[0]
                st.reasons[kind] = st.reasons.get(kind, 0) + 1  # type: ignore[index]
            else:
                good = True
        if good:
            st.accepted += 1
        return out

    def stats(self) -> dict[str, dict[str, Any]]:
        """Per-channel counters: payloads, accepted, rejected, ignored, reasons (kind -> count)."""
        return {ch: s.as_dict() for ch, s in sorted(self._stats.items())}

    @property
    def wheel_source(self) -> str | None:
        """The wheel source now used for WheelSamples (None until one reports)."""
        return self._wheel_active

    # ----------------------------------------------------------------- helpers
    @staticmethod
    def _reject(st: ChannelStats, t_s: float, channel: str, kind: str, detail: str) -> list[Any]:
        st.rejected += 1
        st.reasons[kind] = st.reasons.get(kind, 0) + 1  # type: ignore[index]
        return [Rejected(t_s, channel, f"{kind}: {detail}")]

    def _frozen(self, channel: str, repeated_s: float, out: list[Any]) -> bool:
        """Whether a byte-identical repeat (for ``repeated_s``) decoded to ``out`` is a frozen sensor."""
        if channel == CH_POWER:
            first = out[0]
            return (repeated_s > self.config.frozen_after_s and type(first) is PowerSample
                    and first.power_w != 0.0)
        return True   # GPS sentence or mcu record (a hello line decodes to nothing and never gets here)

    def _use_wheel(self, source: str, t_s: float) -> bool:
        """Whether wheel data from ``source`` is the one to emit now (auto failover)."""
        self._wheel_last_rx[source] = t_s
        if self.config.wheel_source != "auto":
            return source == self.config.wheel_source
        active = self._wheel_active
        if active == source:
            return True
        if active is not None:
            last = self._wheel_last_rx.get(active)
            alive = last is not None and t_s - last <= self.config.wheel_failover_s
            if alive and WHEEL_SOURCES.index(active) <= WHEEL_SOURCES.index(source):
                return False
        self._wheel_active = source
        return True

    def _wheel_sample(self, source: str, t_s: float, channel: str, revs: int, ticks: int) -> Any:
        tracker = self._wheel[source]
        try:
            r = tracker.update(revs, ticks, t_s)
        except PayloadError as exc:
            return Rejected(t_s, channel, f"{exc.kind}: {source} wheel {exc.detail}")
        if not self._use_wheel(source, t_s):
            return None
        return _wheel_sample(t_s, r.revolutions, r.event_time_s, source)

    def _cadence(self, source: str, t_s: float, channel: str, revs: int, ticks: int) -> Any:
        tracker = self._crank[source]
        try:
            r = tracker.update(revs, ticks, t_s)
        except PayloadError as exc:
            return Rejected(t_s, channel, f"{exc.kind}: {source} crank {exc.detail}")
        if r.new_event:
            rpm = 60.0 * r.rate_hz  # type: ignore[operator]
            if rpm > self.config.max_cadence_rpm:
                return Rejected(t_s, channel, f"{OUT_OF_RANGE}: cadence {rpm:.0f} rpm above "
                                              f"{self.config.max_cadence_rpm:g}")
            return _cadence_sample(t_s, rpm)
        if tracker.stopped(t_s, self.config.cadence_stop_s):
            return _cadence_sample(t_s, 0.0)
        return None

    # ---------------------------------------------------------------- channels
    def _power(self, t_s: float, payload: bytes) -> list[Any]:
        m = decode_cycling_power(payload)
        c = self.config
        out: list[Any] = []
        power = m.instantaneous_power_w
        crank_revs = crank_t = energy = None
        if m.crank_revolutions is not None:
            s = self._cadence("power", t_s, CH_POWER, m.crank_revolutions, m.last_crank_event_ticks)  # type: ignore[arg-type]
            if s is not None:
                out.append(s)
            tr = self._crank["power"]
            if tr.started and type(s) is not Rejected:
                crank_revs = tr.revolutions
                crank_t = tr.event_time_s
            if m.accumulated_torque_raw is not None and m.flags & FLAG_ACCUMULATED_TORQUE_CRANK:
                try:
                    energy = _TWO_PI * self._torque.update(m.accumulated_torque_raw) / 32.0
                except PayloadError:
                    energy = None
        if c.min_power_w <= power <= c.max_power_w:
            out.insert(0, _power_sample(t_s, float(power), crank_revs, crank_t, energy, m.pedal_power_balance_pct))
        else:
            out.insert(0, Rejected(t_s, CH_POWER, f"{OUT_OF_RANGE}: power {power} W outside "
                                                  f"{c.min_power_w:g}..{c.max_power_w:g} W"))
        if m.wheel_revolutions is not None:
            s = self._wheel_sample("power", t_s, CH_POWER, m.wheel_revolutions, m.last_wheel_event_ticks)  # type: ignore[arg-type]
            if s is not None:
                out.append(s)
        return out

    def _csc(self, t_s: float, payload: bytes) -> list[Any]:
        m = decode_csc(payload)
        out: list[Any] = []
        if m.wheel_revolutions is not None:
            s = self._wheel_sample("csc", t_s, CH_CSC, m.wheel_revolutions, m.last_wheel_event_ticks)  # type: ignore[arg-type]
            if s is not None:
                out.append(s)
        if m.crank_revolutions is not None:
            s = self._cadence("csc", t_s, CH_CSC, m.crank_revolutions, m.last_crank_event_ticks)  # type: ignore[arg-type]
            if s is not None:
                out.append(s)
        return out

    def _heart_rate(self, t_s: float, payload: bytes) -> list[Any]:
        m = decode_heart_rate(payload)
        if m.sensor_contact is False:
            return [Rejected(t_s, CH_HEART_RATE, "no skin contact: the strap reports no contact")]
        lo, hi = self.config.min_heart_rate_bpm, self.config.max_heart_rate_bpm
        if not lo <= m.heart_rate_bpm <= hi:
            return [Rejected(t_s, CH_HEART_RATE, f"{OUT_OF_RANGE}: heart rate {m.heart_rate_bpm} bpm "
                                                 f"outside {lo:g}..{hi:g}")]
        return [_heart_rate_sample(t_s, float(m.heart_rate_bpm), m.rr_intervals_s)]

    def _gps(self, t_s: float, payload: bytes) -> list[Any]:
        s = decode_nmea(payload, t_s)
        return [] if s is None else [s]

    def _mcu(self, t_s: float, payload: bytes) -> list[Any]:
        r = decode_mcu_line(payload)
        kind = type(r)
        if kind is McuAir:
            return [_air_sample(t_s, r.airspeed_mps, r.pressure_pa, r.temperature_c, r.relative_humidity_pct)]
        if kind is McuWheel:
            s = self._wheel_sample("mcu", t_s, CH_MCU, r.revolutions, r.event_time_us)
            return [] if s is None else [s]
        if kind is McuButton:
            return [MarkerSample(t_s, r.button)]
        if kind is McuHello:
            self._wheel["mcu"].reset()
            return []
        raise PayloadError(UNSUPPORTED, f"record {kind.__name__}")  # pragma: no cover

    def _link(self, t_s: float, payload: bytes) -> list[Any]:
        try:
            text = payload.decode("utf-8")
        except UnicodeDecodeError:
            raise PayloadError("not UTF-8", "link payload is not UTF-8 text") from None
        parts = text.split()
        if len(parts) != 2 or parts[1] not in LINK_STATES:
            raise PayloadError("malformed", f"link payload '{text[:60]}' is not '<channel> up|down|reconnecting'")
        return [LinkSample(t_s, parts[0], parts[1])]

    def _control(self, t_s: float, payload: bytes) -> list[Any]:
        try:
            text = payload.decode("utf-8").strip()
        except UnicodeDecodeError:
            raise PayloadError("not UTF-8", "control payload is not UTF-8 text") from None
        word, _, rest = text.partition(" ")
        if word != "marker":
            raise PayloadError(UNSUPPORTED, f"control command '{text[:40]}' (known: marker [label])")
        return [MarkerSample(t_s, rest.strip() or "marker")]


__all__ = ["ChannelStats", "DecodeConfig", "Decoder"]
