"""The run-up as an optimal-control problem on a distance grid (pure Python).

The course from the start line (0 m) to the trap exit is cut into segments of
at most ``spacing_m`` (25 m by default; shorter near a slow start), with a
node exactly at the trap entry. On each segment the rider holds one power.
The state at a node is the kinetic energy per unit mass E = v²/2 (J/kg), the
W′ balance (J) and the clock (s).

One segment of length ds at power P, with the power balance of Martin et
al. (1998) (see :mod:`livecoach.physics.power_balance`)::

    a(P, v) = (η P / max(v, v_min) - F(v)) / (m + I/r²)
    F(v)    = ½ ρ CdA (v + w)|v + w| + Crr m g cosθ + m g sinθ [+ bearing]
    dE/ds   = a                      (Heun's method, 2nd order, in distance)
    dt      = 2 ds / (v0 + v1)       (exact for constant acceleration)

θ is the mean grade of the segment (elevation change over the segment
length, so the potential energy is exact). The W′ balance is stepped
exactly at constant power over dt (Skiba et al. 2015,
:func:`livecoach.rider.wprime.w_prime_step_j`), and the power may not exceed
CP + (Pmax - CP)·W′bal/W′ at the start of the segment (Morton 1996).

Standing start (start speed 0): the propulsive force is capped at
η P / v_min below v_min = 1 m/s (the physics core's treatment), and the
first segments are short (1 m, growing by half each time up to the
spacing) so the integration stays accurate while the vehicle gets going.

The planner's control is the fraction u in [0, 1] of the power available,
P = u · P_avail(W′bal), which turns the state-dependent power ceiling into a
simple bound. :func:`objective_and_gradient` returns the trap time and its
exact gradient with respect to every u (reverse-mode differentiation of the
discrete simulation), so a gradient method can optimise hundreds of
segments in well under a second.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

from livecoach.errors import PhysicsError, PlanError
from livecoach.physics.power_balance import GRAVITY_MPS2, MIN_PROPULSION_SPEED_MPS

#: Default node spacing, m (the plan's resolution).
DEFAULT_SPACING_M = 25.0
#: Below this speed after the start the vehicle counts as stopped (plan infeasible), m/s.
STALL_SPEED_MPS = 0.5
E_STALL_J_PER_KG = 0.5 * STALL_SPEED_MPS**2
#: Objective cost of easing below CP, s per second at the full ease (b = 1): a
#: tie-breaker so a plan never asks the rider to stop pedalling for a gain of
#: a few ten-thousandths of a second (riders and crews prefer steady power).
EASE_WEIGHT = 5e-4
_E_STALL = E_STALL_J_PER_KG


@dataclass(frozen=True, slots=True)
class RunModel:
    """Everything the planner needs, precomputed on the distance grid (SI units).

    ``nodes_m``: node distances from the start line, m (first = start of
    this (sub)problem, last = trap exit). Per segment k (between node k and
    k+1): ``seg_ds_m``, ``seg_grade`` (mean rise over run), ``seg_force_n``
    (rolling + grade + constant bearing force, N), ``seg_in_trap``.
    ``air_coef_kgpm``: ½ ρ CdA, kg/m. ``bearing_slope_nspm``: speed-dependent
    bearing force slope, N/(m/s).
    """

    nodes_m: tuple[float, ...]
    seg_ds_m: tuple[float, ...]
    seg_grade: tuple[float, ...]
    seg_force_n: tuple[float, ...]
    seg_in_trap: tuple[bool, ...]
    trap_entry_m: float
    trap_exit_m: float
    mass_kg: float
    effective_mass_kg: float
    efficiency: float
    cda_m2: float
    crr: float
    air_density_kgpm3: float
    headwind_mps: float
    bearing_loss: bool
    cp_w: float
    w_prime_j: float
    pmax_w: float

    @property
    def air_coef_kgpm(self) -> float:
        return 0.5 * self.air_density_kgpm3 * self.cda_m2

    @property
    def bearing_slope_nspm(self) -> float:
        return 8.7e-3 if self.bearing_loss else 0.0

    @property
    def n_segments(self) -> int:
        return len(self.seg_ds_m)

    @property
    def decline_rate_per_j(self) -> float:
        """(Pmax - CP)/W′, 1/s per J of balance: the slope of the power ceiling."""
        return (self.pmax_w - self.cp_w) / self.w_prime_j

    def max_power_w(self, w_prime_balance_j: float) -> float:
        """Power available at a balance, W (Morton 1996)."""
        return self.cp_w + self.decline_rate_per_j * min(max(w_prime_balance_j, 0.0), self.w_prime_j)

    def tail(self, from_distance_m: float, start_speed_mps: float | None = None) -> "RunModel":
        """The same problem from ``from_distance_m`` to the trap exit (for re-planning).

        The first segment runs from that distance to the next node (a
        fragment shorter than 0.5 m is merged with the following segment).
        Below 10 m/s (``start_speed_mps``) the first metres are cut into short
        segments as at a standing start (see :func:`grid_nodes_m`).
        """
        nodes = self.nodes_m
        d = min(max(from_distance_m, nodes[0]), nodes[-1])
        if d >= nodes[-1] - 1e-9:
            raise PlanError(f"no course left after {from_distance_m:.1f} m (trap exit {nodes[-1]:.1f} m)")
        k = _segment_index(nodes, d)
        first_end = k + 1
        at_entry = abs(nodes[first_end] - self.trap_entry_m) < 1e-9
        if nodes[first_end] - d < 0.5 and first_end < len(nodes) - 1 and not at_entry:
            first_end += 1
        new_nodes = [d]
        if start_speed_mps is not None and start_speed_mps < 10.0:
            step, x = 1.0, d + 1.0
            spacing = max(self.seg_ds_m)
            while x < nodes[first_end] - 0.25 and step < spacing:
                new_nodes.append(x)
                step *= 1.5
                x += step
        new_nodes.extend(nodes[first_end:])
        seg_grade: list[float] = []
        seg_force: list[float] = []
        seg_trap: list[bool] = []
        seg_ds: list[float] = []
        for a, b in zip(new_nodes[:-1], new_nodes[1:]):
            if b > nodes[first_end] + 1e-9:
                break
            g = self._mean_grade(a, b)
            seg_ds.append(b - a)
            seg_grade.append(g)
            seg_force.append(self._const_force_n(g))
            seg_trap.append(a >= self.trap_entry_m - 1e-9)
        seg_ds.extend(self.seg_ds_m[first_end:])
        seg_grade.extend(self.seg_grade[first_end:])
        seg_force.extend(self.seg_force_n[first_end:])
        seg_trap.extend(self.seg_in_trap[first_end:])
        return replace(
            self,
            nodes_m=tuple(new_nodes),
            seg_ds_m=tuple(seg_ds),
            seg_grade=tuple(seg_grade),
            seg_force_n=tuple(seg_force),
            seg_in_trap=tuple(seg_trap),
        )

    def _mean_grade(self, a: float, b: float) -> float:
        """Mean grade between distances a < b (m) from the per-segment grades."""
        nodes = self.nodes_m
        rise = 0.0
        j = _segment_index(nodes, a)
        while j < len(nodes) - 1 and nodes[j] < b:
            lo, hi = max(nodes[j], a), min(nodes[j + 1], b)
            if hi > lo:
                rise += self.seg_grade[j] * (hi - lo)
            j += 1
        return rise / (b - a)

    def _const_force_n(self, grade: float) -> float:
        theta = math.atan(grade)
        f = self.crr * self.mass_kg * GRAVITY_MPS2 * math.cos(theta)
        f += self.mass_kg * GRAVITY_MPS2 * math.sin(theta)
        if self.bearing_loss:
            f += 91.0e-3
        return f

    def with_(self, **changes: float) -> "RunModel":
        """A copy with other CdA, Crr, air density, head wind or rider values.

        Rebuilds the per-segment forces when Crr changes.
        """
        new = replace(self, **changes)
        if "crr" in changes or "mass_kg" in changes or "bearing_loss" in changes:
            new = replace(new, seg_force_n=tuple(new._const_force_n(g) for g in new.seg_grade))
        return new


def _segment_index(nodes: tuple[float, ...], d: float) -> int:
    lo, hi = 0, len(nodes) - 2
    while lo < hi:
        mid = (lo + hi + 1) // 2
        if nodes[mid] <= d:
            lo = mid
        else:
            hi = mid - 1
    return lo


def grid_nodes_m(
    runup_m: float, trap_m: float, spacing_m: float = DEFAULT_SPACING_M, start_speed_mps: float = 0.0
) -> tuple[float, ...]:
    """Node distances, m: ≤ ``spacing_m`` apart, a node at the trap entry and exit.

    Below a 10 m/s start the first nodes are 1 m apart, growing by half each
    step up to the spacing (accurate integration while the vehicle gets going).
    """
    if spacing_m <= 0.0:
        raise PlanError(f"spacing_m={spacing_m!r} must be > 0")
    nodes = [0.0]
    if start_speed_mps < 10.0:
        step = min(1.0, spacing_m)
        while nodes[-1] + step < min(runup_m, 10.0 * spacing_m) and step < spacing_m:
            nodes.append(nodes[-1] + step)
            step *= 1.5
    start = nodes[-1]
    n1 = max(1, math.ceil((runup_m - start) / spacing_m - 1e-9))
    nodes.extend(start + (runup_m - start) * i / n1 for i in range(1, n1 + 1))
    n2 = max(1, math.ceil(trap_m / spacing_m - 1e-9))
    nodes.extend(runup_m + trap_m * i / n2 for i in range(1, n2 + 1))
    return tuple(nodes)


def build_run_model(
    ride,
    *,
    cda_m2: float | None = None,
    crr: float | None = None,
    air_density_kgpm3: float | None = None,
    headwind_mps: float | None = None,
    spacing_m: float = DEFAULT_SPACING_M,
) -> RunModel:
    """The planning problem of a ride file (``ride``: a RideConfig), with optional overrides."""
    course, vehicle, rider, air = ride.course, ride.vehicle, ride.rider, ride.air
    if course.trap_m <= 0.0 or course.runup_m <= 0.0:
        raise PlanError(
            f"[course] runup_m = {course.runup_m} m and trap_m = {course.trap_m} m must both be > 0"
        )
    if course.distances_m and course.distances_m[-1] < course.trap_exit_m - 1e-6:
        raise PlanError(
            f"[course] the elevation profile ends at {course.distances_m[-1]:g} m, before the trap "
            f"exit at {course.trap_exit_m:g} m: the course is shorter than run-up plus trap"
        )
    if rider.pmax_w <= rider.cp_w:
        raise PlanError(f"[rider] pmax_w = {rider.pmax_w} W must be above cp_w = {rider.cp_w} W")
    if rider.w_prime_j <= 0.0:
        raise PlanError(f"[rider] w_prime_j = {rider.w_prime_j} J must be above 0")
    nodes = grid_nodes_m(course.runup_m, course.trap_m, spacing_m, course.start_speed_mps)
    model_v = vehicle.model(cda_m2, crr)
    rho = air.density_kgpm3 if air_density_kgpm3 is None else air_density_kgpm3
    hw = air.headwind_mps if headwind_mps is None else headwind_mps
    if model_v.cda_m2 <= 0.0:
        raise PlanError(f"CdA = {model_v.cda_m2} m^2 must be above 0 to plan")
    if not (math.isfinite(rho) and rho > 0.0):
        raise PlanError(f"air density {rho!r} kg/m^3 must be above 0")
    seg_ds, seg_grade, seg_trap = [], [], []
    for a, b in zip(nodes[:-1], nodes[1:]):
        seg_ds.append(b - a)
        seg_grade.append((course.elevation_m(b) - course.elevation_m(a)) / (b - a))
        seg_trap.append(a >= course.runup_m - 1e-9)
    m = RunModel(
        nodes_m=nodes,
        seg_ds_m=tuple(seg_ds),
        seg_grade=tuple(seg_grade),
        seg_force_n=(),
        seg_in_trap=tuple(seg_trap),
        trap_entry_m=course.runup_m,
        trap_exit_m=course.trap_exit_m,
        mass_kg=model_v.mass_kg,
        effective_mass_kg=model_v.effective_mass_kg,
        efficiency=model_v.drivetrain_efficiency,
        cda_m2=model_v.cda_m2,
        crr=model_v.crr,
        air_density_kgpm3=rho,
        headwind_mps=hw,
        bearing_loss=model_v.bearing_loss,
        cp_w=rider.cp_w,
        w_prime_j=rider.w_prime_j,
        pmax_w=rider.pmax_w,
    )
    return replace(m, seg_force_n=tuple(m._const_force_n(g) for g in seg_grade))


@dataclass(frozen=True, slots=True)
class Trajectory:
    """A simulated run on the grid. Per node: distance, speed, time, W′ balance;
    per segment: the power held (W). ``stalled_at_m`` is None unless the
    vehicle stopped (speed below STALL_SPEED_MPS) after the start."""

    distance_m: tuple[float, ...]
    speed_mps: tuple[float, ...]
    time_s: tuple[float, ...]
    w_prime_balance_j: tuple[float, ...]
    power_w: tuple[float, ...]
    stalled_at_m: float | None

    def time_at_m(self, distance_m: float) -> float:
        """Clock at a node distance (exact) or interpolated between nodes, s."""
        d = self.distance_m
        k = _segment_index(d, min(max(distance_m, d[0]), d[-1]))
        f = (distance_m - d[k]) / (d[k + 1] - d[k])
        return self.time_s[k] + f * (self.time_s[k + 1] - self.time_s[k])


def segment_step(
    model: RunModel, k: int, v0: float, E0: float, w0: float, power_w: float
) -> tuple[float, float, float, float, bool]:
    """One segment at constant ``power_w`` (W, already within 0..available).

    Returns (v1 m/s, E1 J/kg, W′bal1 J, dt s, stalled). The same arithmetic as
    the objective below (Heun in distance on E = v²/2; exact W′ step).
    """
    ds = model.seg_ds_m[k]
    fc = model.seg_force_n[k]
    M = model.effective_mass_kg
    eta = model.efficiency
    ca = model.air_coef_kgpm
    hw = model.headwind_mps
    b1 = model.bearing_slope_nspm
    vmin = MIN_PROPULSION_SPEED_MPS
    p = power_w
    va = v0 + hw
    a0 = (eta * p / (v0 if v0 > vmin else vmin) - ca * va * abs(va) - fc - b1 * v0) / M
    E1p = E0 + a0 * ds
    if E1p < _E_STALL:
        E1p = _E_STALL
    v1p = math.sqrt(2.0 * E1p)
    va = v1p + hw
    a1 = (eta * p / (v1p if v1p > vmin else vmin) - ca * va * abs(va) - fc - b1 * v1p) / M
    E1 = E0 + 0.5 * (a0 + a1) * ds
    stalled = E1 < _E_STALL
    if stalled:
        E1 = _E_STALL
    v1 = math.sqrt(2.0 * E1)
    dt = 2.0 * ds / (v0 + v1)
    cp, wp = model.cp_w, model.w_prime_j
    if p >= cp:
        w1 = w0 - (p - cp) * dt
    elif w0 >= wp:
        w1 = w0
    else:
        w1 = w0 - (wp - w0) * math.expm1(-(cp - p) * dt / wp)
    if w1 < 0.0:
        w1 = 0.0
    return v1, E1, w1, dt, stalled


def simulate(
    model: RunModel,
    *,
    start_speed_mps: float,
    start_balance_j: float,
    start_time_s: float = 0.0,
    fractions: list[float] | tuple[float, ...] | None = None,
    powers_w: list[float] | tuple[float, ...] | None = None,
) -> Trajectory:
    """Simulate the run: per segment either a fraction of the power available
    (``fractions``, u in 0..1) or a commanded power (``powers_w``, clipped to
    0..available at the segment start). Pure, deterministic."""
    n = model.n_segments
    ctrl = fractions if fractions is not None else powers_w
    if ctrl is None or len(ctrl) != n:
        raise PlanError(f"simulate needs {n} controls, got {None if ctrl is None else len(ctrl)}")
    check_finite_state(start_speed_mps, start_balance_j)
    by_fraction = fractions is not None
    cp, kk = model.cp_w, model.decline_rate_per_j
    v0 = start_speed_mps
    E0 = 0.5 * v0 * v0
    w0 = start_balance_j
    t = start_time_s
    speeds = [v0]
    times = [t]
    wbal = [w0]
    powers = []
    stalled_at = None
    for k in range(n):
        pav = cp + kk * (w0 if w0 > 0.0 else 0.0)
        c = ctrl[k]
        if by_fraction:
            p = (c if c < 1.0 else 1.0) * pav if c > 0.0 else 0.0
        else:
            p = c if c < pav else pav
            if p < 0.0:
                p = 0.0
        v1, E1, w1, dt, stalled = segment_step(model, k, v0, E0, w0, p)
        if stalled and stalled_at is None:
            stalled_at = model.nodes_m[k + 1]
        t += dt
        powers.append(p)
        speeds.append(v1)
        times.append(t)
        wbal.append(w1)
        v0, E0, w0 = v1, E1, w1
    return Trajectory(model.nodes_m, tuple(speeds), tuple(times), tuple(wbal), tuple(powers), stalled_at)


def objective_and_gradient(
    model: RunModel,
    spend: list[float],
    ease: list[float],
    start_speed_mps: float,
    start_balance_j: float,
    runup_weight: float = 0.0,
    want_trajectory: bool = False,
    min_speed_mps: float = 0.0,
) -> tuple[float, list[float], list[float], list[float] | None]:
    """Trap time (s) + ``runup_weight`` × run-up time, and its exact gradient.

    The control of segment k is split in two parts, each in 0..1, so that
    holding CP (both zero) is a bound of the problem rather than a kink:

    * ``spend[k]`` = a: power above CP as a fraction of what is available,
      P = CP + a (Pmax - CP) W′bal/W′, and W′bal falls by that excess × dt;
    * ``ease[k]`` = b: power below CP as a fraction of CP, P = CP - b CP,
      and W′bal recovers exactly over dt (Skiba 2015).

    With both non-zero the power is their sum and the balance takes both
    the spending and the recovery, which is never better than the net power
    (so an optimum uses one at a time); the plan is always re-simulated from
    the net power with the exact model. Returns (objective, d/d spend,
    d/d ease, net powers per segment if ``want_trajectory`` else None).
    Values outside 0..1 are clipped, with zero slope.

    ``min_speed_mps`` > 0 adds a penalty of (½v_min² - E)² s·kg²/J² at every
    node where the speed is below ``min_speed_mps`` after the vehicle first
    reached it, so the optimiser keeps the vehicle rideable over rises.
    """
    n = model.n_segments
    M = model.effective_mass_kg
    eta = model.efficiency
    ca = model.air_coef_kgpm
    hw = model.headwind_mps
    b1 = model.bearing_slope_nspm
    cp, wp = model.cp_w, model.w_prime_j
    kk = model.decline_rate_per_j
    vmin = MIN_PROPULSION_SPEED_MPS
    ds_l, fc_l, trap_l = model.seg_ds_m, model.seg_force_n, model.seg_in_trap
    tape = [None] * n
    powers = [0.0] * n if want_trajectory else None
    e_ride = 0.5 * min_speed_mps * min_speed_mps
    going = start_speed_mps >= min_speed_mps > 0.0
    v0 = start_speed_mps
    E0 = 0.5 * v0 * v0
    w0 = start_balance_j
    total = 0.0
    for k in range(n):
        ds = ds_l[k]
        fc = fc_l[k]
        a = spend[k]
        b = ease[k]
        ac = 0.0 if a < 0.0 else (1.0 if a > 1.0 else a)
        bc = 0.0 if b < 0.0 else (1.0 if b > 1.0 else b)
        wpos = w0 > 0.0
        room = kk * w0 if wpos else 0.0
        p = cp + ac * room - bc * cp
        va0 = v0 + hw
        vp0 = v0 if v0 > vmin else vmin
        a0 = (eta * p / vp0 - ca * va0 * abs(va0) - fc - b1 * v0) / M
        E1p = E0 + a0 * ds
        clip_p = E1p < _E_STALL
        if clip_p:
            E1p = _E_STALL
        v1p = math.sqrt(2.0 * E1p)
        va1 = v1p + hw
        vp1 = v1p if v1p > vmin else vmin
        a1 = (eta * p / vp1 - ca * va1 * abs(va1) - fc - b1 * v1p) / M
        E1 = E0 + 0.5 * (a0 + a1) * ds
        gpen = 0.0
        if going and E1 < e_ride:
            total += (e_ride - E1) ** 2
            gpen = -2.0 * (e_ride - E1)
        clip_1 = E1 < _E_STALL
        if clip_1:
            E1 = _E_STALL
        if min_speed_mps > 0.0 and E1 >= e_ride:
            going = True
        v1 = math.sqrt(2.0 * E1)
        dt = 2.0 * ds / (v0 + v1)
        wm = w0 - ac * room * dt
        if wm < wp:
            ey = math.exp(-bc * cp * dt / wp)
            w1 = wp - (wp - wm) * ey
            rec = True
        else:
            ey = 1.0
            w1 = wm
            rec = False
        wclip = w1 < 0.0
        if wclip:
            w1 = 0.0
        weight = (1.0 if trap_l[k] else runup_weight) + EASE_WEIGHT * bc
        total += weight * dt
        if powers is not None:
            powers[k] = p
        tape[k] = (v0, w0, wpos, room, a, ac, b, bc, p, va0, vp0, clip_p, v1p, va1, vp1, clip_1,
                   v1, dt, wm, ey, rec, wclip, weight, gpen)
        v0, E0, w0 = v1, E1, w1
    g_spend = [0.0] * n
    g_ease = [0.0] * n
    gE1 = 0.0
    gw1 = 0.0
    for k in range(n - 1, -1, -1):
        (v0, w0, wpos, room, a, ac, b, bc, p, va0, vp0, clip_p, v1p, va1, vp1, clip_1,
         v1, dt, wm, ey, rec, wclip, weight, gpen) = tape[k]
        ds = ds_l[k]
        if wclip:
            gw1 = 0.0
        gdt = weight
        gb = EASE_WEIGHT * dt
        if rec:
            # w1 = wp - (wp - wm) ey, ey = exp(-y), y = bc cp dt / wp
            gwm = gw1 * ey
            gy = gw1 * (wp - wm) * ey
            gb += gy * cp * dt / wp
            gdt += gy * bc * cp / wp
        else:
            gwm = gw1
        # wm = w0 - ac room dt
        gw0 = gwm
        gac = -gwm * room * dt
        groom = -gwm * ac * dt
        gdt += -gwm * ac * room
        # dt = 2 ds / (v0 + v1)
        gsum = -gdt * dt / (v0 + v1)
        gv0 = gsum
        gE1t = gE1 + gsum / v1
        if clip_1:
            gE1t = 0.0
        gE1t += gpen
        gE0 = gE1t
        ga0 = 0.5 * ds * gE1t
        ga1 = 0.5 * ds * gE1t
        gp = ga1 * eta / (vp1 * M)
        dadv1 = (-(eta * p / (v1p * v1p) if v1p > vmin else 0.0) - 2.0 * ca * abs(va1) - b1) / M
        gE1p = 0.0 if clip_p else ga1 * dadv1 / v1p
        gE0 += gE1p
        ga0 += gE1p * ds
        gp += ga0 * eta / (vp0 * M)
        dadv0 = (-(eta * p / (v0 * v0) if v0 > vmin else 0.0) - 2.0 * ca * abs(va0) - b1) / M
        gv0 += ga0 * dadv0
        if v0 > 0.0:
            gE0 += gv0 / v0
        # p = cp + ac room - bc cp; room = kk w0
        gac += gp * room
        groom += gp * ac
        gb += -gp * cp
        if wpos:
            gw0 += groom * kk
        if 0.0 <= a <= 1.0:
            g_spend[k] = gac
        if 0.0 <= b <= 1.0:
            g_ease[k] = gb
        gE1 = gE0
        gw1 = gw0
    return total, g_spend, g_ease, powers


def check_finite_state(speed_mps: float, balance_j: float) -> None:
    """Raise :class:`PhysicsError` for a start state the planner cannot use."""
    if not (math.isfinite(speed_mps) and speed_mps >= 0.0):
        raise PhysicsError(f"start speed {speed_mps!r} m/s must be a finite number >= 0")
    if not math.isfinite(balance_j):
        raise PhysicsError(f"start W' balance {balance_j!r} J is not finite")
