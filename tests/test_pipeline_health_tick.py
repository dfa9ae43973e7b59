"""HealthTracker.tick looks at the channels only near the earliest time one can go
stale: it must report exactly what a look at every channel on every tick reports."""

from __future__ import annotations

from hypothesis import given, settings
from hypothesis import strategies as st

from livecoach.pipeline.health import HealthTracker
from livecoach.stream.events import CH_CSC, CH_GPS, CH_HEART_RATE, CH_POWER


def _full_tick(h: HealthTracker, t_s: float) -> list[str]:
    """The tick without the shortcut: every channel, every time (the rule of the docstring)."""
    newly = []
    for name, ch in h._channels.items():
        if ch.last_valid_t_s is None or ch.in_gap:
            continue
        if t_s - ch.last_valid_t_s > ch.limit_s:
            ch.in_gap = True
            ch.gaps += 1
            newly.append(name)
    return newly


ops = st.lists(st.tuples(st.sampled_from(["valid", "rejected", "link_down", "tick"]),
                         st.sampled_from([CH_POWER, CH_CSC, CH_GPS, CH_HEART_RATE]),
                         st.sampled_from([0.0, 0.25, 1.0, 2.999, 3.0, 3.001, 4.999, 5.0, 5.5, 7.0])),
               max_size=80)


@settings(max_examples=300, deadline=None)
@given(ops, st.sampled_from([0.0, 1e4, 3.7e6]))
def test_gated_tick_reports_what_a_full_look_reports(sequence, t0_s):
    fast, full = HealthTracker(), HealthTracker()
    t = t0_s
    for op, channel, dt in sequence:
        t += dt
        for h in (fast, full):
            if op == "valid":
                h.valid(channel, t)
            elif op == "rejected":
                h.rejected(channel)
            elif op == "link_down":
                h.link(channel, False)
        assert fast.tick(t) == _full_tick(full, t)
        assert {n: (c.gaps, c.in_gap) for n, c in fast._channels.items()} == \
            {n: (c.gaps, c.in_gap) for n, c in full._channels.items()}


def test_a_channel_goes_stale_once_just_after_its_limit():
    h = HealthTracker()
    h.valid(CH_HEART_RATE, 10.0)          # limit 5 s
    h.valid(CH_POWER, 11.0)               # limit 3 s
    assert h.tick(13.9) == []
    assert h.tick(14.0) == []             # exactly at the limit: not yet (strictly longer)
    assert h.tick(14.01) == [CH_POWER]
    assert h.tick(14.5) == []             # once per gap
    assert h.tick(15.01) == [CH_HEART_RATE]
    h.valid(CH_POWER, 16.0)
    assert h.tick(19.0) == [] and h.tick(19.02) == [CH_POWER]
