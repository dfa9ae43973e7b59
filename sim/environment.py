"""The simulated world: the true course profile, the air and the wind.

* Course: the ride file's elevation profile (linear between points) plus an
  optional survey error -- independent N(0, sd^2) elevation errors at points
  ``spacing_m`` apart, linear between -- so the module under test works with a
  profile that is slightly wrong, as in the field.
* Air: moist-air density from the weather (``livecoach.physics.atmosphere``);
  optionally the pressure falls with elevation by the hydrostatic equation
  for an isothermal layer, p = p0 * exp(-g * (h - h0) / (R_d * T)) (U.S.
  Standard Atmosphere 1976, eq. 33b form), and the density with it.
* Wind along the course: a steady part plus gusts from an Ornstein-Uhlenbeck
  process (Uhlenbeck & Ornstein 1930; exact update, Gillespie 1996) with the
  given rms and time scale, held constant within one integration step.
"""

from __future__ import annotations

import bisect
import math

from livecoach.physics.atmosphere import G0_MPS2, R_DRY_AIR_JPKGK, air_density_kgpm3
from sim.randomness import Normals, OrnsteinUhlenbeck
from sim.scenario import Scenario


class CourseProfile:
    """Piecewise-linear elevation over distance along the course (m), the true one.

    ``elevation_m(d)`` and ``grade(d)`` (rise over run) are held constant beyond
    the ends, as in :class:`livecoach.config.ridefile.CourseConfig`.
    """

    __slots__ = ("distances_m", "elevations_m", "_last_i")

    def __init__(self, distances_m: tuple[float, ...], elevations_m: tuple[float, ...]) -> None:
        if len(distances_m) < 2 or len(distances_m) != len(elevations_m):
            raise ValueError("a course profile needs at least two points")
        self.distances_m = tuple(distances_m)
        self.elevations_m = tuple(elevations_m)
        self._last_i = 0

    def _segment(self, distance_m: float) -> int:
        d = self.distances_m
        i = self._last_i
        if d[i] <= distance_m < d[i + 1]:
            return i
        i = bisect.bisect_right(d, distance_m) - 1
        i = min(max(i, 0), len(d) - 2)
        self._last_i = i
        return i

    def elevation_m(self, distance_m: float) -> float:
        """Elevation, m, at ``distance_m`` (m)."""
        d, e = self.distances_m, self.elevations_m
        if distance_m <= d[0]:
            return e[0]
        if distance_m >= d[-1]:
            return e[-1]
        i = self._segment(distance_m)
        return e[i] + (distance_m - d[i]) * (e[i + 1] - e[i]) / (d[i + 1] - d[i])

    def grade(self, distance_m: float) -> float:
        """Grade (rise over run, -) at ``distance_m``; 0 beyond the ends."""
        d, e = self.distances_m, self.elevations_m
        if distance_m < d[0] or distance_m >= d[-1]:
            return 0.0
        i = self._segment(distance_m)
        return (e[i + 1] - e[i]) / (d[i + 1] - d[i])


def true_course(scenario: Scenario, seed: int) -> CourseProfile:
    """The true course: the ride file's profile plus the scenario's survey error.

    The profile is extended flat by ``runout_m`` + 1 km past its last point so
    the run-out after the trap is defined.
    """
    course = scenario.ride.course
    ds = list(course.distances_m)
    es = list(course.elevations_m)
    sd = scenario.truth.elevation_error_m
    end = max(ds[-1], course.trap_exit_m + scenario.run.runout_m) + 1000.0
    if sd > 0.0:
        spacing = scenario.truth.elevation_error_spacing_m
        base = CourseProfile(tuple(ds), tuple(es))
        grid = sorted(set(ds) | {k * spacing for k in range(int(ds[-1] // spacing) + 1)})
        grid = [g for g in grid if ds[0] <= g <= ds[-1]]
        noise = Normals(seed, "course.survey_error")
        errors = [sd * noise.next() for _ in range(int(ds[-1] // spacing) + 2)]

        def error_at(x: float) -> float:
            k = int(x // spacing)
            f = x / spacing - k
            return errors[k] * (1.0 - f) + errors[k + 1] * f

        ds = grid
        es = [base.elevation_m(x) + error_at(x) for x in grid]
    if end > ds[-1]:
        ds.append(end)
        es.append(es[-1])
    return CourseProfile(tuple(ds), tuple(es))


class Air:
    """True air along the course: pressure (Pa), temperature (deg C), density (kg/m^3)."""

    def __init__(self, scenario: Scenario, start_elevation_m: float) -> None:
        w, a = scenario.weather, scenario.ride.air
        self.temperature_c = a.temperature_c if w.temperature_c is None else w.temperature_c
        self.relative_humidity_pct = (
            a.relative_humidity_pct if w.relative_humidity_pct is None else w.relative_humidity_pct
        )
        self.pressure0_pa = a.station_pressure_pa if w.pressure_pa is None else w.pressure_pa
        self.start_elevation_m = start_elevation_m
        self.follows_elevation = w.density_follows_elevation
        self.density0_kgpm3 = air_density_kgpm3(
            self.pressure0_pa, self.temperature_c, self.relative_humidity_pct
        )
        self._scale_height_m = R_DRY_AIR_JPKGK * (self.temperature_c + 273.15) / G0_MPS2

    def pressure_pa(self, elevation_m: float) -> float:
        """Static pressure, Pa, at ``elevation_m`` (isothermal hydrostatic from the start line)."""
        return self.pressure0_pa * math.exp(-(elevation_m - self.start_elevation_m) / self._scale_height_m)

    def density_kgpm3(self, elevation_m: float) -> float:
        """Air density, kg/m^3, at ``elevation_m`` (constant unless it follows elevation)."""
        if not self.follows_elevation:
            return self.density0_kgpm3
        return air_density_kgpm3(
            self.pressure_pa(elevation_m), self.temperature_c, self.relative_humidity_pct
        )


class Wind:
    """Wind along the course, m/s (+ against the rider): steady part + OU gusts."""

    def __init__(self, scenario: Scenario, seed: int) -> None:
        w = scenario.weather
        self.steady_mps = scenario.ride.air.headwind_mps if w.headwind_mps is None else w.headwind_mps
        self.gust = OrnsteinUhlenbeck(w.gust_rms_mps, w.gust_time_s, Normals(seed, "weather.gust"))

    @property
    def headwind_mps(self) -> float:
        """The current wind along the course, m/s."""
        return self.steady_mps + self.gust.value

    def step(self, dt_s: float) -> float:
        """Advance the gusts by ``dt_s`` s; return the new wind, m/s."""
        self.gust.step(dt_s)
        return self.steady_mps + self.gust.value
