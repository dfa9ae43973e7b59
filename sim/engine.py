"""The simulation loop: world, rider, vehicle and sensors advanced step by step.

One step of ``1/step_hz`` seconds:

1. the rider turns the target power (scripted profile, or the coach's
   latest ``target_power_w`` in closed loop) into crank power (lag, wobble,
   CP/W'/Pmax limits);
2. the vehicle is integrated by RK4 (:mod:`sim.vehicle`) with that power,
   the wind and the true CdA/Crr held over the step;
3. every sensor emulator sees the step and posts its payloads with receive
   times; the fault injector acts on them;
4. the payloads received by the end of the step are handed out in receive
   order (and fed to the controller in closed loop).

The loop is a generator, so a long run streams its events without holding
them; the truth log is optional and may be decimated. Everything is
deterministic for a given scenario and seed.
"""

from __future__ import annotations

import math
from typing import Any, Callable, Iterator

from livecoach.stream.events import CH_TICK, RawEvent
from sim.environment import Air, Wind, true_course
from sim.faults import FaultInjector
from sim.rider import Rider
from sim.scenario import Scenario
from sim.sensors.base import Outbox, StepInfo
from sim.sensors.gps import GpsReceiver
from sim.sensors.heart import HeartRateStrap
from sim.sensors.mcu import Microcontroller
from sim.sensors.power import PowerMeter
from sim.sensors.wheel import WheelSensor
from sim.truth import TruthLog, TruthSummary
from sim.vehicle import MotionState, rk4_step

#: Speed below which a stopped vehicle after the trap ends the run, m/s.
_STOPPED_MPS = 0.5


def _steps_lookup(start_value: float, steps: list[list[float]]):
    points = [(p[0], p[1]) for p in steps]

    def value_at(distance_m: float) -> float:
        v = start_value
        for at, new in points:
            if distance_m >= at:
                v = new
            else:
                break
        return v

    return value_at


class Simulation:
    """One simulated run. Iterate :meth:`events` once; read :attr:`truth`,
    :attr:`summary` and :attr:`faults` afterwards (or during).

    Closed loop, either way: ``controller.feed(event)`` is called with every
    event and its result's ``.state.target_power_w`` is the rider's target;
    or ``target_fn()`` is asked for the target at every step (when the
    module runs elsewhere, e.g. in the live loop).
    """

    def __init__(self, scenario: Scenario, seed: int | None = None, controller: Any = None,
                 keep_truth: bool = True, truth_every: int = 1,
                 target_fn: Callable[[], float | None] | None = None) -> None:
        self.scenario = scenario
        self.target_fn = target_fn
        self.seed = scenario.seed if seed is None else int(seed)
        self.controller = controller
        self.truth = TruthLog(truth_every) if keep_truth else None
        self.summary = TruthSummary()
        seed_ = self.seed
        sc = scenario
        self.dt_s = 1.0 / sc.run.step_hz
        self.course = true_course(sc, seed_)
        self.air = Air(sc, self.course.elevation_m(0.0))
        self.wind = Wind(sc, seed_)
        self.rider = Rider(sc, seed_)
        self.faults = FaultInjector(sc.faults, seed_)
        self.outbox = Outbox(self.faults.filter)
        self.vehicle = sc.ride.vehicle.model(sc.true_cda_m2, sc.true_crr).with_(
            mass_kg=sc.true_mass_kg,
            drivetrain_efficiency=sc.true_efficiency,
            wheel_inertia_kgm2=sc.true_wheel_inertia_kgm2,
            wheel_radius_m=sc.true_circumference_m / (2.0 * math.pi),
        )
        self.cda_at = _steps_lookup(sc.true_cda_m2, sc.truth.cda_steps)
        self.crr_at = _steps_lookup(sc.true_crr, sc.truth.crr_steps)
        self.mcu = None
        if sc.airspeed.enabled or sc.barometer.enabled or (
            sc.wheel_sensor.enabled and sc.wheel_sensor.link == "mcu"
        ):
            self.mcu = Microcontroller(sc.airspeed, sc.barometer, seed_)
        self.sensors: list[Any] = []
        if sc.power_meter.enabled:
            self.power_meter = PowerMeter(sc.power_meter, self.rider.cadence_rpm, seed_, self.faults)
            self.sensors.append(self.power_meter)
        if sc.wheel_sensor.enabled:
            mcu = self.mcu if sc.wheel_sensor.link == "mcu" else None
            self.wheel = WheelSensor(sc.wheel_sensor, sc.true_circumference_m, seed_, mcu)
            self.sensors.append(self.wheel)
        if sc.gps.enabled:
            self.gps = GpsReceiver(sc.gps, sc.run.start_utc, seed_)
            self.sensors.append(self.gps)
        if self.mcu is not None:
            self.sensors.append(self.mcu)
        if sc.heart_rate.enabled:
            self.sensors.append(HeartRateStrap(sc.heart_rate, self.rider.cp_w, self.rider.w_prime_j, seed_))
        self.target_w: float | None = None
        self.events_out = 0
        self.state = MotionState(0.0, 0.0, sc.ride.course.start_speed_mps)
        self.finished = False

    # ------------------------------------------------------------------ control
    def _feed_controller(self, ev: RawEvent) -> None:
        result = self.controller.feed(ev)
        state = getattr(result, "state", None)
        target = getattr(state, "target_power_w", None)
        if target is not None and math.isfinite(target):
            self.target_w = float(target)

    def _target_w(self, t_s: float, distance_m: float) -> float:
        course = self.scenario.ride.course
        if (self.rider.stand_down_after_trap and distance_m >= course.trap_exit_m
                and self.scenario.run.until == "runout"):
            return 0.0
        if self.target_fn is not None:
            target = self.target_fn()
            if target is not None and math.isfinite(target):
                self.target_w = float(target)
        if self.rider.follows_coach and self.target_w is not None:
            return self.target_w
        return self.rider.profile.target_w(t_s, distance_m)

    # --------------------------------------------------------------------- loop
    def events(self) -> Iterator[RawEvent]:
        """Run the simulation, yielding every received payload in receive order."""
        sc = self.scenario
        course = sc.ride.course
        dt = self.dt_s
        st = self.state
        veh = self.vehicle
        truth = self.truth
        summ = self.summary
        info = StepInfo()
        info.temperature_c = self.air.temperature_c
        info.relative_humidity_pct = self.air.relative_humidity_pct
        end_distance = course.trap_exit_m + sc.run.runout_m
        soak = sc.run.until == "time_limit"
        tick_dt = 1.0 / sc.run.tick_hz if sc.run.tick_hz > 0.0 else math.inf
        next_tick = tick_dt
        m_eff = veh.effective_mass_kg
        if self.mcu is not None:
            self.mcu.start(0.0, self.outbox)
        summ.w_prime_min_j = self.rider.w_bal_j
        if self.rider.follows_coach and self.controller is not None and sc.run.tick_hz > 0.0:
            # The module is on at the start line before the rider pushes off: one
            # tick lets it show its starting target, which the rider then follows
            # (without it the rider's first target would be the scripted profile's).
            self.outbox.push_raw(0.0, CH_TICK, b"")
            for ev in self.outbox.pop_until(0.0):
                self._feed_controller(ev)
                self.events_out += 1
                yield ev
        k = 0
        reason = ""
        while True:
            t0 = k * dt
            x0, v0 = st.distance_m, st.speed_mps
            target = self._target_w(t0, x0)
            w_bal0 = self.rider.w_bal_j
            power = self.rider.power_for_step(target, dt)
            wind = self.wind.headwind_mps
            cda, crr = self.cda_at(x0), self.crr_at(x0)
            if cda != veh.cda_m2 or crr != veh.crr:
                veh = veh.with_(cda_m2=cda, crr=crr)
            elev = self.course.elevation_m(x0)
            rho = self.air.density_kgpm3(elev)
            if truth is not None:
                w = st.work_j
                truth.add((
                    t0, x0, v0, st.accel_mps2, power, target, cda, crr, wind, v0 + wind, rho, elev,
                    self.course.grade(x0), w_bal0, w[0], w[1], w[2], w[3], w[4], w[5],
                    0.5 * m_eff * v0 * v0,
                ))
            rk4_step(st, dt, power, self.course, rho, veh, wind, truth is not None)
            st.t_s = t1 = (k + 1) * dt
            k += 1
            self.wind.step(dt)
            # Sensors see the step.
            info.t0_s, info.t1_s = t0, t1
            info.x0_m, info.x1_m = x0, st.distance_m
            info.v0_mps, info.v1_mps = v0, st.speed_mps
            info.power_w = power
            info.pedalling = power > 0.0
            info.headwind_mps = wind
            info.elevation_m = self.course.elevation_m(st.distance_m)
            info.pressure_pa = self.air.pressure_pa(info.elevation_m)
            info.w_prime_balance_j = self.rider.w_bal_j
            for sensor in self.sensors:
                sensor.advance(info, self.outbox)
            self.faults.inject_due(t1, self.outbox)
            while next_tick <= t1:
                self.outbox.push_raw(next_tick, CH_TICK, b"")
                next_tick += tick_dt
            for ev in self.outbox.pop_until(t1):
                if self.controller is not None:
                    self._feed_controller(ev)
                self.events_out += 1
                yield ev
            # Bookkeeping of the outcome.
            if st.speed_mps > summ.max_speed_mps:
                summ.max_speed_mps = st.speed_mps
            if self.rider.w_bal_j < summ.w_prime_min_j:
                summ.w_prime_min_j = self.rider.w_bal_j
            if summ.trap_entry_t_s is None and st.distance_m >= course.trap_entry_m > x0:
                summ.trap_entry_t_s = info.crossing_time_s(course.trap_entry_m)
            if summ.trap_exit_t_s is None and st.distance_m >= course.trap_exit_m > x0:
                summ.trap_exit_t_s = info.crossing_time_s(course.trap_exit_m)
                summ.w_prime_at_trap_exit_j = self.rider.w_bal_j
                if summ.trap_entry_t_s is not None:
                    summ.trap_speed_mps = course.trap_m / (summ.trap_exit_t_s - summ.trap_entry_t_s)
            if st.distance_m >= end_distance and not soak:
                reason = "run-out done"
            elif t1 >= sc.run.max_time_s - 1e-9:
                reason = "time limit"
            elif not soak and t1 > 5.0 and st.speed_mps < _STOPPED_MPS and power == 0.0 and st.distance_m > 1.0:
                reason = "stopped"
            if reason:
                break
        # The final state, and whatever is still on its way.
        if truth is not None:
            w = st.work_j
            truth.add((
                st.t_s, st.distance_m, st.speed_mps, st.accel_mps2, 0.0, 0.0, self.cda_at(st.distance_m),
                self.crr_at(st.distance_m), self.wind.headwind_mps, st.speed_mps + self.wind.headwind_mps,
                self.air.density_kgpm3(self.course.elevation_m(st.distance_m)),
                self.course.elevation_m(st.distance_m), self.course.grade(st.distance_m),
                self.rider.w_bal_j, w[0], w[1], w[2], w[3], w[4], w[5], 0.5 * m_eff * st.speed_mps ** 2,
            ), force=True)
        self.faults.flush(st.t_s, self.outbox)
        for ev in self.outbox.pop_all():
            if self.controller is not None:
                self._feed_controller(ev)
            self.events_out += 1
            yield ev
        summ.end_reason = reason
        summ.end_t_s = st.t_s
        summ.end_distance_m = st.distance_m
        summ.rider_limited_steps = self.rider.limited_steps
        summ.steps = k
        summ.events = self.events_out
        summ.faults = self.faults.counts()
        self.finished = True
