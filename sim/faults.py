"""Faults on demand: what goes wrong with sensors in the field, applied to the bytes.

Kinds (``[[fault]]`` in a scenario):

* ``dropout``: payloads on the channel are lost for ``duration_s`` (radio
  fade); no link event.
* ``disconnect``: the link goes down (``link`` event "<channel> down"), tries
  to come back ("reconnecting") and is up again after ``duration_s``
  ("up"); nothing arrives in between. The sensor keeps counting meanwhile.
* ``stuck``: the channel repeats its last payload, byte for byte, for
  ``duration_s`` (a frozen sensor firmware).
* ``garbage``: ``count`` payloads of junk within the window, each checked
  with the project's decoder to be really undecodable: random bytes, or a
  real payload with bytes changed.
* ``offset_drift``: the power meter's zero wanders at ``rate_w_per_min``
  from ``start_s`` (for ``duration_s``, or to the end when 0).
* ``duplicate``: within the window each payload is delivered twice with
  probability ``probability``.
* ``out_of_order``: within the window a payload is held back with
  probability ``probability`` and delivered after the next one.

Every fault keeps a :class:`FaultRecord` with the number of payloads it
touched, so tests and the bench can check that each one was seen and survived.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

from livecoach.errors import DecodeError
from livecoach.stream.events import CH_CSC, CH_GPS, CH_HEART_RATE, CH_LINK, CH_MCU, CH_POWER
from sim.randomness import Normals
from sim.scenario import FaultSpec
from sim.sensors.base import Outbox


@dataclass
class FaultRecord:
    """One injected fault and what it did (times in simulated s)."""

    index: int
    kind: str
    channel: str
    start_s: float
    end_s: float
    affected: int = 0
    link_events: int = 0

    def to_dict(self) -> dict:
        return asdict(self)


def _decodes(channel: str, payload: bytes) -> bool:
    """True when the project's decoder accepts ``payload`` on ``channel``."""
    from livecoach.codecs import csc, cycling_power, heart_rate, mcu_line, nmea

    try:
        if channel == CH_POWER:
            cycling_power.decode_cycling_power(payload)
        elif channel == CH_CSC:
            csc.decode_csc(payload)
        elif channel == CH_HEART_RATE:
            heart_rate.decode_heart_rate(payload)
        elif channel == CH_MCU:
            mcu_line.decode_mcu_line(payload)
        elif channel == CH_GPS:
            return nmea.decode_nmea(payload, 0.0) is not None
    except DecodeError:
        return False
    return True


class FaultInjector:
    """Applies the scenario's faults to the payloads passing through an :class:`Outbox`."""

    def __init__(self, specs: tuple[FaultSpec, ...], seed: int) -> None:
        self.specs = specs
        self.rng = Normals(seed, "faults")
        self.records = [
            FaultRecord(i, f.kind, f.channel, f.start_s,
                        f.start_s + f.duration_s if f.duration_s > 0.0 else float("inf"))
            for i, f in enumerate(specs)
        ]
        self._by_channel: dict[str, list[int]] = {}
        for i, f in enumerate(specs):
            if f.kind not in ("garbage", "offset_drift"):
                self._by_channel.setdefault(f.channel, []).append(i)
        self._last_payload: dict[str, bytes] = {}
        self._frozen: dict[int, bytes] = {}
        self._held: dict[str, tuple[int, bytes]] = {}
        # Scheduled injections: (t_s, kind, index, data), sorted by time.
        self._scheduled: list[tuple[float, int, str]] = []
        for i, f in enumerate(specs):
            if f.kind == "garbage":
                span = f.duration_s
                for k in range(f.count):
                    t = f.start_s + (span * self.rng.uniform() if span > 0.0 else 0.05 * k)
                    self._scheduled.append((t, i, "garbage"))
            elif f.kind == "disconnect":
                self._scheduled.append((f.start_s, i, "down"))
                self._scheduled.append((f.start_s + min(1.0, 0.5 * f.duration_s), i, "reconnecting"))
                self._scheduled.append((f.start_s + f.duration_s, i, "up"))
        self._scheduled.sort()
        self._next = 0

    # --- power-meter offset drift -------------------------------------------
    def power_offset_w(self, t_s: float) -> float:
        """Extra zero offset of the power meter at ``t_s`` (W) from drift faults."""
        total = 0.0
        for rec, f in zip(self.records, self.specs):
            if f.kind != "offset_drift" or t_s < f.start_s:
                continue
            total += f.rate_w_per_min / 60.0 * (min(t_s, rec.end_s) - f.start_s)
        return total

    def note_offset_reports(self, t_s: float) -> None:
        """Count a power report made while a drift fault acts."""
        for rec, f in zip(self.records, self.specs):
            if f.kind == "offset_drift" and f.start_s <= t_s:
                rec.affected += 1

    # --- scheduled injections -------------------------------------------------
    def inject_due(self, t_s: float, outbox: Outbox) -> None:
        """Post the garbage and link events scheduled up to ``t_s`` (s)."""
        while self._next < len(self._scheduled) and self._scheduled[self._next][0] <= t_s:
            t, i, what = self._scheduled[self._next]
            self._next += 1
            rec, f = self.records[i], self.specs[i]
            if what == "garbage":
                outbox.push_raw(t, f.channel, self._garbage(f.channel))
                rec.affected += 1
            else:
                outbox.push_raw(t, CH_LINK, f"{f.channel} {what}".encode())
                rec.link_events += 1

    def _garbage(self, channel: str) -> bytes:
        rng = self.rng
        for _ in range(100):
            base = self._last_payload.get(channel)
            if base and rng.uniform() < 0.5:
                b = bytearray(base)
                for _ in range(1 + rng.integers(0, 3)):
                    pos = rng.integers(0, len(b))
                    b[pos] = (b[pos] + 1 + rng.integers(0, 255)) & 0xFF
                if rng.uniform() < 0.3:
                    del b[rng.integers(0, len(b)):]
                payload = bytes(b)
            else:
                payload = rng.bytes(1 + rng.integers(0, 24))
            if channel in (CH_GPS, CH_MCU):
                payload = payload.replace(b"\n", b"?")
            if not _decodes(channel, payload):
                return payload
        return b"\xff"  # never valid on any channel

    # --- the outbox filter ----------------------------------------------------
    def filter(self, t_s: float, channel: str, payload: bytes) -> list[tuple[float, str, bytes]]:
        """What is delivered of a payload sent at ``t_s`` on ``channel`` (see module doc)."""
        active = self._by_channel.get(channel)
        out = [(t_s, channel, payload)]
        if active:
            for i in active:
                rec, f = self.records[i], self.specs[i]
                if not (rec.start_s <= t_s < rec.end_s):
                    if f.kind == "stuck" and t_s < rec.start_s:
                        self._frozen[i] = payload
                    continue
                if f.kind in ("dropout", "disconnect"):
                    rec.affected += 1
                    out = []
                    break
                if f.kind == "stuck":
                    frozen = self._frozen.setdefault(i, payload)
                    out = [(t, ch, frozen) for t, ch, _ in out]
                    rec.affected += 1
                elif f.kind == "duplicate" and self.rng.uniform() < f.probability:
                    out = out + [(t + 5e-4, ch, p) for t, ch, p in out]
                    rec.affected += 1
                elif f.kind == "out_of_order" and channel not in self._held:
                    if self.rng.uniform() < f.probability:
                        self._held[channel] = (i, payload)
                        rec.affected += 1
                        out = []
        if out:
            self._last_payload[channel] = out[0][2]
            held = self._held.pop(channel, None)
            if held is not None:
                last_t = out[-1][0]
                out.append((last_t + 5e-4, channel, held[1]))
        return out

    def flush(self, t_s: float, outbox: Outbox) -> None:
        """Deliver payloads still held back (end of run)."""
        for channel, (_, payload) in sorted(self._held.items()):
            outbox.push_raw(t_s, channel, payload)
        self._held.clear()

    def counts(self) -> dict[str, int]:
        """Payloads touched, by fault kind."""
        out: dict[str, int] = {}
        for rec in self.records:
            out[rec.kind] = out.get(rec.kind, 0) + rec.affected
        return out
