"""positional_builder: fast construction of frozen slotted records, same records as by keyword."""

from __future__ import annotations

import dataclasses
import pickle

import pytest

from livecoach.pipeline.processor import StepResult
from livecoach.pipeline.state import LiveState, Notice, SensorHealth
from livecoach.stream.builders import positional_builder
from livecoach.stream.events import RawEvent
from livecoach.coach.live import CoachOutput
from livecoach.codecs.mcu_line import McuAir, McuWheel
from livecoach.stream.samples import (AirSample, CadenceSample, GpsSample, HeartRateSample, PowerSample,
                                      WheelSample)


def _values(cls):
    """Distinct made-up values, one per field, in declaration order."""
    return [f"{f.name}-{i}" if "str" in str(f.type) else float(i) + 0.5
            for i, f in enumerate(dataclasses.fields(cls))]


@pytest.mark.parametrize("cls", [LiveState, SensorHealth, StepResult, RawEvent, GpsSample, AirSample,
                                 WheelSample, PowerSample, CadenceSample, HeartRateSample, McuAir, McuWheel,
                                 CoachOutput])
def test_built_record_is_the_record_built_by_keyword(cls):
    values = _values(cls)
    by_keyword = cls(**{f.name: v for f, v in zip(dataclasses.fields(cls), values)})
    built = positional_builder(cls)(*values)
    assert type(built) is cls
    assert built == by_keyword
    assert repr(built) == repr(by_keyword)
    assert hash(built) == hash(by_keyword)
    assert pickle.loads(pickle.dumps(built)) == by_keyword
    with pytest.raises(dataclasses.FrozenInstanceError):
        setattr(built, dataclasses.fields(cls)[0].name, 1.0)


def test_every_field_must_be_given():
    build = positional_builder(RawEvent)
    with pytest.raises(TypeError):
        build(1.0, "tick")            # payload forgotten: no silent default
    with pytest.raises(TypeError):
        build(1.0, "tick", b"", b"")  # one too many


def test_only_frozen_slotted_dataclasses():
    @dataclasses.dataclass(slots=True)
    class Mutable:
        x: float

    @dataclasses.dataclass(frozen=True)
    class NoSlots:
        x: float

    for cls in (Mutable, NoSlots, int):
        with pytest.raises(TypeError):
            positional_builder(cls)


def test_built_notice_keeps_its_own_data_dict():
    build = positional_builder(Notice)
    a = build(1.0, "warning", "x", {"k": 1})
    b = build(1.0, "warning", "x", {"k": 1})
    assert a == b and a.data is not b.data
