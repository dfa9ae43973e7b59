"""Shared ride files for the planner and coach tests (invented demo data)."""

from __future__ import annotations

import copy
import tomllib

from livecoach.cli.commands.init import example_ride_text
from livecoach.config.ridefile import parse_ride_dict

_BASE = tomllib.loads(example_ride_text())


def example_ride(**patch):
    """The example ride file with section patches, e.g. course={"runup_m": 2000}."""
    data = copy.deepcopy(_BASE)
    for section, values in patch.items():
        data.setdefault(section, {}).update(values)
    return parse_ride_dict(data, "test ride")


def short_ride(**patch):
    """A short flying-start run: 2000 m run-up at 24 m/s into a 200 m trap (fast to brute-force)."""
    course = {"runup_m": 2000.0, "start_speed_mps": 24.0, "elevation": [[0, 100.0], [2200, 85.0]]}
    course.update(patch.pop("course", {}))
    return example_ride(course=course, **patch)
