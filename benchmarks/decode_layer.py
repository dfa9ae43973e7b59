"""Benchmark: decode-layer time per event (target: a small share of the
pipeline's 100 us median per event on the development machine).

Run: .venv/bin/python benchmarks/decode_layer.py [--events N]
Prints the median and 99th percentile per channel and overall, in us.
"""

from __future__ import annotations

import argparse
import statistics
import time

from livecoach.codecs.csc import CscMeasurement, encode_csc
from livecoach.codecs.cycling_power import CyclingPowerMeasurement, encode_cycling_power
from livecoach.codecs.heart_rate import HeartRateMeasurement, encode_heart_rate
from livecoach.codecs.mcu_line import McuAir, McuWheel, encode_mcu_line
from livecoach.codecs.nmea import encode_gga, encode_rmc, utc_time_text
from livecoach.pipeline.decode import Decoder
from livecoach.stream.events import CH_CSC, CH_GPS, CH_HEART_RATE, CH_MCU, CH_POWER, RawEvent


def events(n: int) -> list[RawEvent]:
    """A mixed stream like a ride: 4 Hz power and CSC, 1 Hz HR, 5 Hz GPS, 20 Hz air, 4 Hz mcu wheel."""
    out: list[RawEvent] = []
    circ, v = 1.47, 20.0
    for i in range(n):
        t = i * 0.05
        k = int(t * v / circ)
        ev = k * circ / v
        if i % 5 == 0:
            out.append(RawEvent(t, CH_POWER, encode_cycling_power(CyclingPowerMeasurement.make(
                300 + i % 7, crank=(int(t * 1.6), int(t * 1.6) * 640), wheel=(k, int(ev * 2048))))))
        if i % 5 == 1:
            out.append(RawEvent(t, CH_CSC, encode_csc(CscMeasurement.make(wheel=(k, int(ev * 1024))))))
        if i % 20 == 2:
            out.append(RawEvent(t, CH_HEART_RATE, encode_heart_rate(HeartRateMeasurement.make(150, rr_intervals_s=(0.4,)))))
        if i % 4 == 3:
            if i % 8 == 3:
                line = encode_rmc(utc_time=utc_time_text(t), utc_date="150626", latitude_deg=-23.0 - t * 1e-5,
                                  longitude_deg=-67.0, speed_mps=v, course_deg=180.0)
            else:
                line = encode_gga(utc_time=utc_time_text(t), latitude_deg=-23.0 - t * 1e-5, longitude_deg=-67.0,
                                  altitude_m=1400.0)
            out.append(RawEvent(t, CH_GPS, line))
        out.append(RawEvent(t + 0.001, CH_MCU, encode_mcu_line(McuAir(int(t * 1e6), airspeed_mps=v + (i % 3) * 0.01))))
        if i % 5 == 4:
            out.append(RawEvent(t + 0.002, CH_MCU, encode_mcu_line(McuWheel(int(t * 1e6), k, int(ev * 1e6)))))
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--events", type=int, default=20000, help="loop steps (each gives 1-3 events)")
    args = ap.parse_args()
    evs = events(args.events)
    Decoder().feed(evs[0])  # warm up imports (pynmea2 is imported lazily)
    d = Decoder()
    per_channel: dict[str, list[float]] = {}
    for ev in evs:
        t0 = time.perf_counter_ns()
        d.feed(ev)
        per_channel.setdefault(ev.channel, []).append((time.perf_counter_ns() - t0) / 1000.0)
    everything = [x for xs in per_channel.values() for x in xs]
    print(f"{len(everything)} events")
    for ch, xs in sorted(per_channel.items()):
        xs.sort()
        print(f"{ch:20s} n={len(xs):6d} median {statistics.median(xs):6.1f} us  p99 {xs[int(0.99 * len(xs))]:6.1f} us")
    everything.sort()
    print(f"{'all':20s} n={len(everything):6d} median {statistics.median(everything):6.1f} us  "
          f"p99 {everything[int(0.99 * len(everything))]:6.1f} us")
    rejected = {ch: s["rejected"] for ch, s in d.stats().items() if s["rejected"]}
    print("rejected:", rejected or "none")


if __name__ == "__main__":
    main()
