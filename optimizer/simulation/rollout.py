"""The stepping loop: controller, push, and what happened at every step.

Each step (MuJoCo's split step, so the controller sees the current state):
the joint torque is the plan's feed-forward torque plus joint PD tracking
(gains of the knot whose step it is; a swinging leg's reference shifted
towards the plan's world-frame foot path,
:class:`~optimizer.simulation.reference.SwingPaths`), plus in ``informed``
mode the plan's response to the push acting right now (the controller is
told the push exactly, as from an ideal force sensor);
torques are clipped to the plan's limits. The ``-Kd v`` part of the PD acts
through MuJoCo's joint damping, which ``implicitfast`` integrates implicitly
(two nearly coaxial wrist joints form a mode with almost no inertia that an
explicit damper would destabilize at any practical step); the rest of the
torque is clipped so that the total stays within the limits at the current
velocity. The push is a force (or wrench)
at the disturbance frame's origin, world axes.

A :class:`Rollout` records, per step, the contact points, their normal
forces and which torques were clipped, and stops early at the first broken
survival rule when asked to (:class:`SurvivalRules`; only feet the plan has
in stance are judged).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import mujoco
import numpy as np

MODES = ("informed", "blind")


@dataclass
class SurvivalRules:
    """What counts as surviving a push.

    Feet are judged only while the plan has them in stance
    (:mod:`optimizer.simulation.stances`): a swinging foot may move and carry
    no force freely.

    Attributes
    ----------
    slip : float
        Largest displacement of a stance foot's contact point along its
        surface [m], from where it was when watching began (or, for a foot
        that touches down later, where it was at the end of its ``touchdown``
        time).
    contact_loss : float
        Longest time a stance foot may carry no normal force [s].
    saturation : float
        Longest time a joint torque may stay clipped at its limit [s].
    touchdown : float
        Settling time after a planned touchdown (the first knot of a stance
        interval that does not begin the plan) during which the foot is not
        yet judged [s]: the replayed foot lands a little before or after the
        planned knot and bounces on the soft contact.
    """

    slip: float = 0.005
    contact_loss: float = 0.005
    saturation: float = 0.02
    touchdown: float = 0.05


@dataclass
class Push:
    """A push held at full size over ``[start, start + hold]``, with raised-cosine ramps.

    Attributes
    ----------
    direction : ndarray, shape (d,)
        Unit direction, world axes (``[force; moment]`` for a wrench).
    size : float
        Full size [N] (the norm of the force or wrench).
    start, hold, ramp : float
        Time full size is reached, how long it is held, ramp duration [s].
    """

    direction: np.ndarray
    size: float
    start: float
    hold: float = 0.2
    ramp: float = 0.02

    @property
    def begins(self) -> float:
        return self.start - self.ramp

    @property
    def ends(self) -> float:
        return self.start + self.hold + self.ramp

    def at(self, t: float) -> np.ndarray:
        """The push at time ``t`` [N, or N and N m]."""
        if t <= self.begins or t >= self.ends:
            return np.zeros_like(self.direction)
        if t < self.start:
            scale = 0.5 - 0.5 * math.cos(math.pi * (t - self.begins) / self.ramp)
        elif t <= self.start + self.hold:
            scale = 1.0
        else:
            scale = 0.5 + 0.5 * math.cos(math.pi * (t - self.start - self.hold) / self.ramp)
        return scale * self.size * self.direction


@dataclass
class Record:
    """What a rollout saw, one row per step.

    Attributes
    ----------
    time : ndarray, shape (n,)
        [s], the state's time at the start of each step.
    base : ndarray, shape (n, 7)
        Base position [m] and quaternion ``(x, y, z, w)``.
    joints : ndarray, shape (n, nj)
        Joint coordinates.
    sites : ndarray, shape (n, ns, 3)
        Positions of the tracked frames (order of ``Scene.sites``) [m].
    normal_force : ndarray, shape (n, nc)
        Normal force on each foot [N].
    clipped : ndarray of bool, shape (n, nj)
        The commanded torque was clipped at its limit.
    failure : str
        Empty, or the first broken survival rule (with where and when).
    diverged : bool
        The simulation produced non-finite numbers.
    """

    time: np.ndarray
    base: np.ndarray
    joints: np.ndarray
    sites: np.ndarray
    normal_force: np.ndarray
    clipped: np.ndarray
    failure: str = ""
    diverged: bool = False
    site_names: list = field(default_factory=list)


class Rollout:
    """Simulate a scene under the tracking controller.

    Parameters
    ----------
    scene : Scene
    reference : PlanReference
    gains : PDGains
    mode : str
        ``"informed"`` or ``"blind"``.
    disturbance_frame : str
        Frame the push acts at (a site of the scene).
    shape : ndarray, shape (d, d)
        The plan's disturbance shape matrix W (push ``F = W u``).
    torque_limits : tuple of ndarray
        Lower and upper limits, shape (nj,) each.
    stances : StanceSchedule
        The plan's stance intervals: which feet the rules judge, when, and
        along which surface slip is measured.
    joint_names : list of str
    swing : SwingPaths or None
        World-frame correction of swinging legs (None: joint tracking only).
    """

    def __init__(self, scene, reference, gains, mode, disturbance_frame, shape, torque_limits, stances,
                 joint_names, swing=None):
        if mode not in MODES:
            raise ValueError(f"mode must be one of {MODES}")
        self.scene, self.reference, self.gains, self.mode = scene, reference, gains, mode
        self.site = scene.sites[disturbance_frame]
        self.body = int(scene.model.site_bodyid[self.site])
        self.shape = np.asarray(shape, float)
        self.lower, self.upper = torque_limits
        self.site_ids = np.array(list(scene.sites.values()), int)
        self.site_names = list(scene.sites)
        self.foot_of_geom = {int(g): int(c) for g, c in zip(scene.foot_geoms, scene.foot_contacts)}
        self.stances, self.swing = stances, swing
        self.joint_names = list(joint_names)
        scene.model.dof_damping[:] = 0.0
        self._gain_knot = -1

    def run(self, until: float, push: Push | None = None, rules: SurvivalRules | None = None,
            watch_from: float = 0.0) -> Record:
        """Step from the scene's current state to time ``until`` [s].

        With ``rules``, the run stops at the first broken rule counted from
        ``watch_from`` [s], for the feet the plan has in stance (slip measured
        from where each foot was when it began to be watched).
        """
        sc, m, d = self.scene, self.scene.model, self.scene.data
        dt = m.opt.timestep
        n = max(int(round((until - d.time) / dt)), 0)
        nj, nc = sc.joint_dof.size, self.stances.contacts
        rec = Record(np.zeros(n), np.zeros((n, 7)), np.zeros((n, nj)), np.zeros((n, self.site_ids.size, 3)),
                     np.zeros((n, nc)), np.zeros((n, nj), bool), site_names=self.site_names)
        wrap = sc.continuous
        force6, scratch, jacobian = np.zeros(6), np.zeros(m.nv), np.zeros((3, m.nv))
        watch = _Watch(rules, dt, self.site_names[:nc], self.joint_names, self.stances) if rules is not None else None
        for i in range(n):
            mujoco.mj_step1(m, d)
            t = d.time
            q, v = d.qpos[sc.joint_qpos], d.qvel[sc.joint_dof]
            q_ref, v_ref, tau = self.reference.at(t)
            kp, kd = self._gains_at(t)
            error = q_ref - q
            error[wrap] = (error[wrap] + np.pi) % (2 * np.pi) - np.pi
            if self.swing is not None:
                self._swing_shift(t, error, jacobian)
            damping = kd * v
            tau = tau + kp * error + kd * (v_ref - v)
            d.qfrc_applied[:] = 0.0
            if push is not None:
                wrench = push.at(t)
                if wrench.any():
                    if self.mode == "informed":
                        tau = tau + self.reference.informed_torque(t, np.linalg.solve(self.shape, wrench))
                    torque = wrench[3:6] if wrench.size == 6 else np.zeros(3)
                    scratch[:] = 0.0
                    mujoco.mj_applyFT(m, d, wrench[:3], torque, d.site_xpos[self.site], self.body, scratch)
                    d.qfrc_applied[:] += scratch
            clipped = (tau > self.upper) | (tau < self.lower)
            d.qfrc_applied[sc.joint_dof] += np.clip(tau, self.lower, self.upper) + damping
            rec.time[i] = t
            rec.base[i, :3] = d.qpos[:3]
            rec.base[i, 3:] = d.qpos[[4, 5, 6, 3]]
            rec.joints[i] = q
            rec.sites[i] = d.site_xpos[self.site_ids]
            rec.clipped[i] = clipped
            mujoco.mj_step2(m, d)
            for j in range(d.ncon):
                contact = d.contact[j]
                foot = self.foot_of_geom.get(int(contact.geom1), self.foot_of_geom.get(int(contact.geom2)))
                if foot is not None:
                    mujoco.mj_contactForce(m, d, j, force6)
                    rec.normal_force[i, foot] += force6[0]
            if not np.isfinite(d.qacc).all() or not np.isfinite(d.qpos).all():
                rec.failure, rec.diverged = f"the simulation diverged at t = {t:.3f} s", True
                return _trimmed(rec, i + 1)
            if watch is not None and t >= watch_from - 0.5 * dt:
                rec.failure = watch.check(t, rec.sites[i, :nc], rec.normal_force[i], clipped)
                if rec.failure:
                    return _trimmed(rec, i + 1)
        return rec

    def _swing_shift(self, t: float, error, jacobian) -> None:
        """Add to ``error`` (joint reference minus position) the swing legs' world-frame correction."""
        k, s = self.reference.locate(t)
        for c in self.swing.swinging_at(k):
            site = self.site_ids[c]
            mujoco.mj_jacSite(self.scene.model, self.scene.data, jacobian, None, int(site))
            leg = self.swing.legs[c]
            miss = self.swing.point(k, s, c) - self.scene.data.site_xpos[site]
            error[leg] += self.swing.shift(jacobian[:, self.scene.joint_dof[leg]], miss)

    def _gains_at(self, t: float) -> tuple[np.ndarray, np.ndarray]:
        """PD gains of the knot whose step contains ``t``; MuJoCo's joint damping follows them."""
        k = self.reference.locate(t)[0]
        if k != self._gain_knot:
            self._gain_knot = k
            self.scene.model.dof_damping[self.scene.joint_dof] = self.gains.kd[k]
        return self.gains.kp[k], self.gains.kd[k]


def _trimmed(rec: Record, n: int) -> Record:
    for name in ("time", "base", "joints", "sites", "normal_force", "clipped"):
        setattr(rec, name, getattr(rec, name)[:n])
    return rec


class _Watch:
    """Online check of the survival rules from the moment a push begins.

    Each foot is judged only inside a stance interval (after its touchdown
    time); slip is measured along that interval's surface from the foot's
    position at the first sample it was judged in this interval.
    """

    def __init__(self, rules: SurvivalRules, dt: float, feet, joints, stances):
        self.rules, self.dt, self.feet, self.joints, self.stances = rules, dt, feet, joints, stances
        self.no_contact = np.zeros(len(feet))
        self.clipped_for = np.zeros(len(joints))
        self.judged = [None] * len(feet)
        self.origin = np.zeros((len(feet), 3))

    def check(self, t: float, points, normal_force, clipped) -> str:
        """The first broken rule at time ``t`` [s], or an empty string."""
        now = self.stances.current(t, self.rules.touchdown)
        for c, stance in enumerate(now):
            if stance is not self.judged[c]:
                self.judged[c], self.origin[c], self.no_contact[c] = stance, points[c], 0.0
        for c, stance in enumerate(now):
            if stance is None:
                continue
            moved = points[c] - self.origin[c]
            slip = float(np.linalg.norm(moved - (moved @ stance.normal) * stance.normal))
            if slip > self.rules.slip:
                return f"{self.feet[c]} slipped {1e3 * slip:.1f} mm at t = {t:.3f} s"
        judged = np.array([stance is not None for stance in now])
        self.no_contact = np.where(judged & (normal_force <= 0.0), self.no_contact + self.dt, 0.0)
        lost = int(np.argmax(self.no_contact))
        if self.no_contact[lost] > self.rules.contact_loss:
            return f"{self.feet[lost]} lost contact at t = {t:.3f} s"
        self.clipped_for = np.where(clipped, self.clipped_for + self.dt, 0.0)
        held = int(np.argmax(self.clipped_for))
        if self.clipped_for[held] > self.rules.saturation:
            return (f"{self.joints[held]} torque at its limit for over {1e3 * self.rules.saturation:.0f} ms "
                    f"at t = {t:.3f} s")
        return ""
