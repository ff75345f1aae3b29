"""Nominal replay and the largest survived push, from a plan file.

:class:`Simulator` builds the scene once. :meth:`Simulator.nominal` replays
the plan without a push and measures tracking: base and hand against the
plan at every knot, the hand against every target, each contact point against
the foothold of each of its stance intervals while the plan has it in stance
(:mod:`.stances`; swinging feet are not judged), contact losses in stance,
clipped torques. :meth:`Simulator.largest_push`
pushes at the disturbance frame along the certified weakest direction of a
knot (exact certification, :mod:`optimizer.analysis.certify`), full size from
the knot's time on for ``hold`` seconds (from ``ramp`` on at the first knot, so
the push ramps up like any other), and bisects for the largest size the
robot survives (:class:`~optimizer.simulation.rollout.SurvivalRules`, watched
from the push's start until ``settle`` seconds after it ends). Bisection
assumes survival is monotone in the push size.

Sizes are in the plan's disturbance coordinates ``u`` (``F = W u``; newtons
for a force with ``W = I``), so they compare directly with the margins.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import mujoco
import numpy as np
import pinocchio as pin

from ..analysis.certify import certify_response
from ..analysis.knot_response import PlanRobot, knot_response, torque_limits
from ..problem.reserve import full_value
from .reference import PlanReference, SwingPaths, pd_gains
from .rollout import Push, Rollout, SurvivalRules
from .scene import ContactSettings, build_scene
from .stances import StanceSchedule


SMALLEST_SCALE = 0.01  # bisection starts at the margin, or at this fraction of the robot's weight if larger


@dataclass
class Settings:
    """How to simulate (defaults stated in the README).

    Attributes
    ----------
    contact : ContactSettings
    rules : SurvivalRules
    full_error, stance_full_error : float
        Joint error [rad] at which the PD stiffness reaches the torque limit,
        for free joints (the arm, a swinging leg) and for joints that move a
        contact in stance at the knot (the legs; softer, so that tracking
        errors of a closed chain do not squeeze the feet off their
        footholds, stiff enough that the base does not sag while a foot
        swings); ``damping`` the damping ratio of each joint alone.
    hold, ramp, settle : float
        Push held at full size [s], ramp up and down [s], watched after it [s].
    tolerance : float
        Bisection stops when the bracket is below this fraction of the
        certified margin.
    max_ratio : float
        Largest push tried, in multiples of the certified margin.
    foot_tolerance, target_tolerance : float
        Nominal replay passes when every contact point stays within
        ``foot_tolerance`` [m] of its interval's foothold while judged in
        stance and the hand within ``target_tolerance`` [m] of every target.
    swing_correction : bool
        Steer swinging legs along the plan's world-frame foot path
        (:class:`~optimizer.simulation.reference.SwingPaths`).
    """

    contact: ContactSettings = field(default_factory=ContactSettings)
    rules: SurvivalRules = field(default_factory=SurvivalRules)
    full_error: float = 0.1
    stance_full_error: float = 0.2
    damping: float = 1.0
    hold: float = 0.2
    ramp: float = 0.02
    settle: float = 0.3
    tolerance: float = 0.02
    max_ratio: float = 8.0
    foot_tolerance: float = 0.005
    target_tolerance: float = 0.02
    swing_correction: bool = True


@dataclass
class Target:
    """A hand target as the replay checks it: frame, position [m], window [s], label."""

    frame: str
    position: np.ndarray
    t_start: float
    t_end: float
    label: str = ""


@dataclass
class PushResult:
    """The largest survived push at one knot in one mode.

    Attributes
    ----------
    knot, time : int, float
    mode : str
    direction : ndarray
        Certified weakest direction (world axes, unit).
    margin : float
        The plan's certified margin at the knot [N].
    exact : float
        Exact smallest unrejectable force at the knot [N].
    linear_limit : float
        Size at which the plan's linear response reaches a limit along this
        direction [N] (what informed mode is expected to survive, statically).
    survived : float
        Largest survived size [N] (bisection bracket low end).
    failed : float
        Smallest size found not survived [N] (inf: none up to the cap).
    failure : str
        What ended the smallest failed run.
    trials : int
    weight : float
        The robot's weight [N]; the ratio to a margin below 0.1 % of it is
        left out (not a meaningful figure).
    """

    knot: int
    time: float
    mode: str
    direction: np.ndarray
    margin: float
    exact: float
    linear_limit: float
    survived: float
    failed: float
    failure: str
    trials: int
    weight: float = 0.0

    @property
    def ratio(self) -> float:
        """Survived push over the certified margin (NaN for a margin below 0.1 % of the weight)."""
        return self.survived / self.margin if self.margin > 1e-3 * self.weight and self.margin > 0 else math.nan

    def to_json(self) -> dict:
        return {"knot": self.knot, "time_s": self.time, "mode": self.mode,
                "direction": [float(x) for x in self.direction], "certified_margin_N": _num(self.margin),
                "exact_margin_N": _num(self.exact), "linear_response_limit_N": _num(self.linear_limit),
                "largest_survived_N": _num(self.survived), "smallest_failed_N": _num(self.failed),
                "survived_over_certified": _num(self.ratio), "failure": self.failure, "trials": self.trials}


def _num(x):
    x = float(x)
    return x if math.isfinite(x) else None


class Simulator:
    """A plan in MuJoCo, ready to replay and push.

    Parameters
    ----------
    plan : Plan
    surfaces : list of Surface
    targets : list of Target
    hand_frame : str
    settings : Settings, optional
    disturbance : int
        Index into ``plan.meta["disturbances"]``.
    """

    def __init__(self, plan, surfaces, targets, hand_frame: str, settings: Settings | None = None,
                 disturbance: int = 0):
        self.plan, self.targets, self.hand_frame = plan, list(targets), hand_frame
        self.settings = settings or Settings()
        self.disturbance = disturbance
        entry = plan.meta["disturbances"][disturbance]
        self.disturbance_frame = entry["frame"]
        self.shape = np.array(entry["shape"], float)
        frames = [hand_frame, self.disturbance_frame] + [t.frame for t in self.targets]
        self.scene = build_scene(plan, surfaces, self.settings.contact, frames)
        angles = np.array([self.scene.joint_angles(q) for q in plan.q])
        self.reference = PlanReference(plan, angles, disturbance)
        self.limits = actuator_limits(plan.meta)
        self._robot = PlanRobot(plan.meta, disturbance)
        self.stances = StanceSchedule.of(plan)
        self.swing = SwingPaths(plan, self.scene.pin_model) if self.settings.swing_correction else None
        stance = stance_joints(self._robot, plan)
        full_error = np.where(stance, self.settings.stance_full_error, self.settings.full_error)
        self.gains = pd_gains(self.scene.pin_model, plan.q, np.minimum(-self.limits[0], self.limits[1]),
                              full_error, self.settings.damping)
        self.weight = float(pin.computeTotalMass(self.scene.pin_model) * np.linalg.norm(plan.meta["gravity"]))
        self._start_states: dict = {}

    def rollout(self, mode: str) -> Rollout:
        return Rollout(self.scene, self.reference, self.gains, mode, self.disturbance_frame, self.shape,
                       self.limits, self.stances, self.plan.meta["joint_names"], self.swing)

    def _restart(self) -> None:
        self.scene.data.time = 0.0
        self.scene.set_state(self.plan.q[0], self.plan.v[0])

    # ------------------------------------------------------------ nominal replay

    def nominal(self) -> dict:
        """Replay the plan without a push; tracking figures (m, deg, s) and pass flags."""
        self._restart()
        rec = self.rollout("blind").run(self.reference.duration + self.settings.contact.timestep)
        return nominal_report(self, rec)

    # ------------------------------------------------------------ pushes

    def certified_direction(self, k: int):
        """Exact certificate of knot k: (rho [N], unit direction in u, world direction)."""
        response = knot_response(self.plan, k, self._robot)
        cert, _ = certify_response(response, float(self.plan.margins[k, self.disturbance]
                                                   if self.plan.margins is not None else self.plan.margin[k]))
        return cert, response

    def push_at(self, k: int, size: float, direction_u=None) -> Push:
        """A push of ``size`` [N] at knot k along unit ``direction_u`` (default: certified weakest)."""
        if direction_u is None:
            cert, _ = self.certified_direction(k)
            direction_u = cert.weakest_u
        u = np.asarray(direction_u, float)
        s = self.settings
        return Push(self.shape @ (u / np.linalg.norm(u)), float(size), max(float(self.plan.t[k]), s.ramp),
                    s.hold, s.ramp)

    def survives(self, push: Push, mode: str) -> str:
        """Run one push in ``mode``; the broken survival rule, or an empty string if survived."""
        return self._trial(push, mode).failure

    def largest_push(self, k: int, mode: str) -> PushResult:
        """Bisect for the largest push along knot k's certified weakest direction that is survived."""
        s = self.settings
        cert, response = self.certified_direction(k)
        margin = float(self.plan.margin[k]) if self.disturbance == 0 else float(self.plan.margins[k, self.disturbance])
        u_dir = np.asarray(cert.weakest_u, float) / np.linalg.norm(cert.weakest_u)
        limit = linear_limit_along(response, u_dir, self.reference.response_gains(k))
        scale = max(margin, SMALLEST_SCALE * self.weight)
        start = self.push_at(k, 0.0, u_dir).start
        trials, last = 0, ""

        def survived(size: float) -> bool:
            nonlocal trials, last
            trials += 1
            last = self.survives(self.push_at(k, size, u_dir), mode)
            return not last

        def result(lo, hi, failure):
            return PushResult(k, start, mode, cert.direction, margin, cert.rho, limit, lo, hi, failure, trials,
                              self.weight)

        if not survived(0.0):
            return result(0.0, 0.0, "fails without a push: " + last)
        lo, hi = 0.0, scale
        while survived(hi):
            lo = hi
            if hi >= s.max_ratio * scale:
                return result(lo, math.inf, f"survived the largest push tried ({s.max_ratio:g} x the margin)")
            hi = min(2.0 * hi, s.max_ratio * scale)
        failure = last
        while hi - lo > s.tolerance * scale:
            mid = 0.5 * (lo + hi)
            if survived(mid):
                lo = mid
            else:
                hi, failure = mid, last
        return result(lo, hi, failure)

    def _trial(self, push: Push, mode: str):
        """One run from just before the push until ``settle`` after it, watched by the rules."""
        s = self.settings
        begin = max(push.begins, 0.0)
        key = round(begin, 9)
        m, d = self.scene.model, self.scene.data
        kind = mujoco.mjtState.mjSTATE_INTEGRATION
        if key not in self._start_states:
            self._restart()
            self.rollout("blind").run(begin)
            state = np.zeros(mujoco.mj_stateSize(m, kind))
            mujoco.mj_getState(m, d, state, kind)
            self._start_states[key] = state
        mujoco.mj_setState(m, d, self._start_states[key], kind)
        mujoco.mj_forward(m, d)
        return self.rollout(mode).run(push.ends + s.settle, push, s.rules, watch_from=begin)


def actuator_limits(meta: dict) -> tuple[np.ndarray, np.ndarray]:
    """Torque limits (lower, upper), (nj,) each [N m], of the actuators the replay clips at.

    A plan made with a ``torque_reserve`` r meets (and is certified against)
    its ``torque_limits``, the actuators' limits times ``1 - r``; the reserve
    is for the tracking controller, so the replay clips at the actuators' own.
    """
    lower, upper = torque_limits(meta)
    return full_value(meta, "torque_reserve", lower), full_value(meta, "torque_reserve", upper)


def stance_joints(robot: PlanRobot, plan) -> np.ndarray:
    """(K, nj) bool: joints that move a contact the plan has in stance at each knot (non-zero
    column of that contact's Jacobian at the knot)."""
    out = np.zeros((plan.q.shape[0], len(plan.meta["joint_names"])), bool)
    for k, q in enumerate(plan.q):
        jc, _ = robot.jacobians(q)
        rows = np.repeat(np.asarray(plan.contact_active[k], bool), 3)
        out[k] = np.abs(jc[rows, 6:]).max(axis=0, initial=0.0) > 1e-9
    return out


def linear_limit_along(response, u_dir, gains) -> float:
    """Push size [N] along unit ``u_dir`` at which the informed response meets its first limit.

    Each limit row ``a_u . u + a_lambda . dlambda <= b`` with ``dlambda = K u``
    (``gains`` K, shape (3 na, d): the response informed mode applies)
    reaches its room at ``b / ((a_u + K^T a_lambda) . u_dir)`` when that rate
    is positive (the same rows as the linear-gain margin, one-sided).
    """
    rows = response.limit_rows()
    d = rows.dim
    rate = (rows.a_ub[:, :d] + rows.a_ub[:, d:] @ gains) @ u_dir
    with np.errstate(divide="ignore", invalid="ignore"):
        sizes = np.where(rate > 1e-12, rows.b_ub / rate, np.inf)
    return float(sizes.min(initial=np.inf))


# A stance foot is underloaded when the replay gives it less than this share of its planned normal force.
UNDERLOAD = 0.5


def zero_force_spans(lost) -> np.ndarray:
    """Lengths (in steps) of the runs of True in the boolean series ``lost``."""
    padded = np.concatenate([[False], np.asarray(lost, bool), [False]])
    edges = np.flatnonzero(np.diff(padded.astype(int)))
    return edges[1::2] - edges[::2]


def binding_knots(t, target: Target) -> list:
    """Knots a target binds: those inside its window, else the knot nearest its middle."""
    inside = [k for k, tk in enumerate(t) if target.t_start - 1e-9 <= tk <= target.t_end + 1e-9]
    return inside or [int(np.argmin(np.abs(np.asarray(t) - 0.5 * (target.t_start + target.t_end))))]


def foot_report(sim: Simulator, rec) -> list:
    """Per contact, over the samples it is judged in (its stance intervals, after touchdowns):
    largest distance from the interval's foothold [m], largest slip along the interval's surface
    from the foothold [m], longest time without normal force [s] and how many such spans exceed
    the contact-loss rule; its stance intervals (knots) when it steps."""
    plan, s = sim.plan, sim.settings
    dt = sim.scene.model.opt.timestep
    judged = sim.stances.judged_series(rec.time, s.rules.touchdown)
    windows = knot_windows(plan.t, rec.time)
    feet = []
    for c, name in enumerate(plan.meta["contact_frames"]):
        distance, slip = np.zeros(rec.time.size), np.zeros(rec.time.size)
        for i in np.unique(judged[:, c][judged[:, c] >= 0]):
            stance = sim.stances.intervals[i]
            rows = judged[:, c] == i
            moved = rec.sites[rows, c] - stance.foothold
            distance[rows] = np.linalg.norm(moved, axis=1)
            slip[rows] = np.linalg.norm(moved - np.outer(moved @ stance.normal, stance.normal), axis=1)
        spans = zero_force_spans((judged[:, c] >= 0) & (rec.normal_force[:, c] <= 0.0)) * dt
        own = sim.stances.by_contact[c]
        feet.append({"frame": name, "distance_m": float(distance.max(initial=0.0)),
                     "slip_m": float(slip.max(initial=0.0)),
                     "longest_without_force_s": float(spans.max(initial=0.0)),
                     "contact_losses": int(np.count_nonzero(spans > s.rules.contact_loss)),
                     "stances": [[st.first, st.last] for st in own],
                     "underloaded": first_underload(sim, rec, judged, windows, c)})
    return feet


def knot_windows(knot_times, times) -> list:
    """Per knot, the samples of ``times`` [s] within half a knot step of its time (boolean masks)."""
    knot_times = np.asarray(knot_times, float)
    half = 0.5 * float(knot_times[1] - knot_times[0]) if knot_times.size > 1 else 0.0
    return [np.abs(times - tk) <= half for tk in knot_times]


def first_underload(sim: Simulator, rec, judged, windows, c: int) -> dict | None:
    """The first judged knot at which contact ``c`` carried less than :data:`UNDERLOAD` of its planned normal
    force: the knot, its time [s], the planned normal force (N, along its stance surface's normal), the
    replayed one (N, the mean over the knot's window of :func:`knot_windows`), the plan's certified margin
    there (N) and :data:`UNDERLOAD` itself (``share``); None when it never did."""
    plan = sim.plan
    for k, window in enumerate(windows):
        rows = window & (judged[:, c] >= 0)
        if not rows.any():
            continue
        stance = sim.stances.intervals[int(np.bincount(judged[rows, c]).argmax())]
        planned = float(plan.contact_forces[k, c] @ stance.normal)
        replayed = float(rec.normal_force[rows, c].mean())
        if replayed < UNDERLOAD * planned:
            return {"knot": k, "t_s": float(plan.t[k]), "planned_n": planned, "replayed_n": replayed,
                    "certified_margin_n": float(plan.margin[k]), "share": UNDERLOAD}
    return None


def nominal_report(sim: Simulator, rec) -> dict:
    """Tracking figures of a nominal replay record."""
    plan, scene, s = sim.plan, sim.scene, sim.settings
    pm = scene.pin_model
    data = pm.createData()
    steps = [int(np.argmin(np.abs(rec.time - tk))) for tk in plan.t]
    names = rec.site_names
    hand = names.index(sim.hand_frame)
    base_err, turn_err, hand_err = [], [], []
    for k, i in enumerate(steps):
        pin.framesForwardKinematics(pm, data, plan.q[k])
        base_err.append(float(np.linalg.norm(rec.base[i, :3] - plan.q[k, :3])))
        r_sim = pin.Quaternion(rec.base[i, 6], *rec.base[i, 3:6]).normalized().toRotationMatrix()
        turn_err.append(float(np.degrees(np.linalg.norm(pin.log3(data.oMi[1].rotation.T @ r_sim)))))
        hand_err.append(float(np.linalg.norm(rec.sites[i, hand] - data.oMf[pm.getFrameId(sim.hand_frame)].translation)))
    targets = []
    for target in sim.targets:
        column = names.index(target.frame)
        knots = binding_knots(plan.t, target)
        err = max(float(np.linalg.norm(rec.sites[steps[k], column] - target.position)) for k in knots)
        targets.append({"label": target.label, "frame": target.frame, "knots": knots, "error_m": err,
                        "ok": err <= s.target_tolerance})
    feet = foot_report(sim, rec)
    dt = scene.model.opt.timestep
    clipped = rec.clipped.sum(axis=0) * dt
    joint_err = np.abs(rec.joints - np.array([sim.reference.at(t)[0] for t in rec.time])).max(initial=0.0)
    worst_k = int(np.argmax(hand_err))
    report = {
        "duration_s": float(rec.time[-1]) if rec.time.size else 0.0,
        "base_error_m": max(base_err), "base_turn_deg": max(turn_err),
        "hand_frame": sim.hand_frame, "hand_error_m": max(hand_err), "hand_error_knot": worst_k,
        "joint_error_rad": float(joint_err),
        "targets": targets, "feet": feet,
        "torque_clipped_s": {n: float(x) for n, x in zip(plan.meta["joint_names"], clipped) if x > 0},
        "failure": rec.failure,
    }
    report["feet_ok"] = all(f["distance_m"] <= s.foot_tolerance for f in feet) and not rec.diverged
    report["targets_ok"] = all(t["ok"] for t in targets)
    report["contacts_kept"] = all(f["contact_losses"] == 0 for f in feet)
    report["ok"] = report["feet_ok"] and report["targets_ok"] and report["contacts_kept"]
    return report
