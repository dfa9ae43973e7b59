"""The live coach: target power, cues and the trap-speed prediction (pure).

See :mod:`livecoach.coach.live` (the coach), :mod:`livecoach.coach.cues`
(cue names, words and the hysteresis), :mod:`livecoach.coach.predict`
(re-planning from the measured state) and :mod:`livecoach.coach.settings`
(the ``[coach]`` ride-file section).
"""

from livecoach.coach.cues import (
    CUE_DONE,
    CUE_EASE,
    CUE_GO,
    CUE_LIFT,
    CUE_READY,
    CUE_STEADY,
    CUE_TEXT,
    CUE_TRAP,
    CueMachine,
)
from livecoach.coach.live import CoachOutput, LiveCoach
from livecoach.coach.predict import Replan, Replanner
from livecoach.coach.settings import CoachConfig

__all__ = [
    "CUE_DONE",
    "CUE_EASE",
    "CUE_GO",
    "CUE_LIFT",
    "CUE_READY",
    "CUE_STEADY",
    "CUE_TEXT",
    "CUE_TRAP",
    "CoachConfig",
    "CoachOutput",
    "CueMachine",
    "LiveCoach",
    "Replan",
    "Replanner",
]
