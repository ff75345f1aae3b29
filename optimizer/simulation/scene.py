"""A MuJoCo scene of a plan: the robot from its URDF, the terrain, the contacts.

The robot is written as MJCF from the Pinocchio model of the plan's URDF (not
through MuJoCo's own URDF reader), one body per Pinocchio joint with that
joint's lumped inertia, so both engines integrate the same rigid bodies:
masses, centres of mass, inertia tensors, joint placements and axes are
copied, fixed links are already merged by Pinocchio. The base is a free
joint (unactuated). Joint position limits become MuJoCo joint limits.

Feet are small spheres of radius ``r``, one per contact and terrain solid
the plan stands that contact on (its stance intervals,
:mod:`optimizer.simulation.stances`): each touches its solid at the contact
frame's origin, its centre ``r`` (less a 10 um preload) from the origin
along the surface normal of the solid's first stance interval, in the leg's
orientation at that interval's first knot. So a foot that steps from the
floor onto a wall's side has a sphere below it for the floor and one beside
it for the wall, each tangent where the plan puts the contact, and a foot
rolling on its sphere keeps its contact point where it was (a sphere
centred at the contact point would carry it ``r`` per radian of roll).
Each sphere collides only with its own solid, through an explicit contact
pair carrying the full friction the plan used there (the coefficient of
that solid's stance intervals, per knot from ``meta.contact_knot_surfaces``
when the plan stores it; for a plan made with a ``friction_reserve`` r,
that coefficient divided by ``1 - r``); the contact's first sphere also
collides, with its first coefficient, with every solid the plan never
stands that contact on (a swinging foot that strikes the terrain meets it).
Nothing else collides: the plan does not model link collisions either.

Layouts: Pinocchio ``q = [x y z qx qy qz qw, joints]`` with the base twist in
the base frame; MuJoCo ``qpos = [x y z qw qx qy qz, joints]`` with the base's
linear velocity in the world frame and its angular velocity in the base
frame. :class:`Scene` converts between them.
"""
from __future__ import annotations

import xml.etree.ElementTree as ET
from dataclasses import dataclass, field

import mujoco
import numpy as np
import pinocchio as pin

from ..errors import PlanFileError
from ..problem.reserve import full_value
from .stances import stance_intervals
from .surfaces import surface_under

HINGE_AXES = {"RX": (1, 0, 0), "RY": (0, 1, 0), "RZ": (0, 0, 1), "RUBX": (1, 0, 0), "RUBY": (0, 1, 0),
              "RUBZ": (0, 0, 1)}
SLIDE_AXES = {"PX": (1, 0, 0), "PY": (0, 1, 0), "PZ": (0, 0, 1)}
CONTINUOUS = {"RUBX", "RUBY", "RUBZ", "RevoluteUnboundedUnaligned"}
PRELOAD = 1e-5  # m each foot sphere reaches into its solid at its first knot, so every planted contact is active at once


@dataclass
class ContactSettings:
    """Physics settings of the scene (defaults suit stiff ground at a 0.5 ms step).

    Attributes
    ----------
    timestep : float
        Integration step [s].
    foot_radius : float
        Radius of each foot sphere [m]; small, since the plan's contacts are points.
    time_constant, damping_ratio : float
        MuJoCo ``solref`` of the contacts: how fast penetration is corrected [s]
        (at least two steps, as MuJoCo advises) and its damping ratio.
    impedance : tuple of 3 floats
        MuJoCo ``solimp`` (dmin, dmax, width [m]).
    impratio : float
        Ratio of frictional to normal constraint impedance; values above 1
        make friction harder than the normal contact (MuJoCo's advice for
        elliptic cones to prevent creep).
    cone : str
        ``"elliptic"`` (the Coulomb cone itself) or ``"pyramidal"``.
    """

    timestep: float = 0.0005
    foot_radius: float = 0.005
    time_constant: float = 0.002
    damping_ratio: float = 1.0
    impedance: tuple = (0.95, 0.99, 0.001)
    impratio: float = 10.0
    cone: str = "elliptic"


@dataclass
class Scene:
    """A compiled MuJoCo model of a plan, with the maps between layouts.

    Attributes
    ----------
    model, data : mujoco.MjModel, mujoco.MjData
    xml : str
        The MJCF text.
    pin_model : pinocchio.Model
        Model of the plan's URDF with a free-flyer root.
    joint_qpos, joint_dof : ndarray of int, shape (nj,)
        MuJoCo qpos and dof address of each actuated joint (plan order).
    joint_q : ndarray of int, shape (nj,)
        Index of each joint's first entry in the Pinocchio ``q``.
    continuous : ndarray of bool, shape (nj,)
        Joints stored as (cos, sin) in Pinocchio.
    foot_geoms : ndarray of int, shape (ng,)
        Geom id of every foot sphere (a contact has one per solid it stands on).
    foot_contacts : ndarray of int, shape (ng,)
        The contact (index into ``meta.contact_frames``) of each foot sphere.
    sites : dict of str to int
        Site id of every frame the scene tracks (contacts, hand, disturbances).
    surfaces : list
        The terrain shapes (:class:`~optimizer.simulation.surfaces.Surface`).
    """

    model: object
    data: object
    xml: str
    pin_model: object
    joint_qpos: np.ndarray
    joint_dof: np.ndarray
    joint_q: np.ndarray
    continuous: np.ndarray
    foot_geoms: np.ndarray
    foot_contacts: np.ndarray
    sites: dict
    surfaces: list = field(default_factory=list)

    def joint_angles(self, q) -> np.ndarray:
        """Actuated joint coordinates (rad or m) of a Pinocchio ``q``; continuous joints as angles."""
        q = np.asarray(q, float)
        out = q[self.joint_q].copy()
        c = self.continuous
        out[c] = np.arctan2(q[self.joint_q[c] + 1], q[self.joint_q[c]])
        return out

    def set_state(self, q, v) -> None:
        """Put the Pinocchio state ``(q, v)`` into ``data`` (no forward pass)."""
        q, v = np.asarray(q, float), np.asarray(v, float)
        d = self.data
        d.qpos[:3] = q[:3]
        d.qpos[3:7] = [q[6], q[3], q[4], q[5]]
        d.qpos[self.joint_qpos] = self.joint_angles(q)
        rot = pin.Quaternion(q[6], q[3], q[4], q[5]).normalized().toRotationMatrix()
        d.qvel[:3] = rot @ v[:3]
        d.qvel[3:6] = v[3:6]
        d.qvel[self.joint_dof] = v[6:]
        mujoco.mj_forward(self.model, d)

    def base_pose(self) -> tuple[np.ndarray, np.ndarray]:
        """Base position [m] and rotation matrix (world) of the current state."""
        quat = self.data.qpos[3:7]
        rot = pin.Quaternion(quat[0], quat[1], quat[2], quat[3]).normalized().toRotationMatrix()
        return self.data.qpos[:3].copy(), rot

    def pinocchio_state(self) -> tuple[np.ndarray, np.ndarray]:
        """The current state in Pinocchio's layout ``(q, v)``."""
        d, pm = self.data, self.pin_model
        q, v = np.zeros(pm.nq), np.zeros(pm.nv)
        pos, rot = self.base_pose()
        q[:3] = pos
        w, x, y, z = d.qpos[3:7] / np.linalg.norm(d.qpos[3:7])
        q[3:7] = [x, y, z, w]
        angles = d.qpos[self.joint_qpos]
        q[self.joint_q] = angles
        c = self.continuous
        q[self.joint_q[c]] = np.cos(angles[c])
        q[self.joint_q[c] + 1] = np.sin(angles[c])
        v[:3] = rot.T @ d.qvel[:3]
        v[3:6] = d.qvel[3:6]
        v[6:] = d.qvel[self.joint_dof]
        return q, v


def _fmt(values) -> str:
    return " ".join(f"{float(x):.12g}" for x in np.ravel(values))


def _quat_wxyz(rot) -> np.ndarray:
    quat = pin.Quaternion(np.asarray(rot, float)).normalized()
    return np.array([quat.w, quat.x, quat.y, quat.z])


def _joint_kind(model, i: int, where) -> tuple[str, np.ndarray]:
    """MuJoCo joint type and axis (in the joint frame) of Pinocchio joint ``i``."""
    short = model.joints[i].shortname().replace("JointModel", "")
    if short in HINGE_AXES:
        return "hinge", np.array(HINGE_AXES[short], float)
    if short in SLIDE_AXES:
        return "slide", np.array(SLIDE_AXES[short], float)
    if short in ("RevoluteUnaligned", "RevoluteUnboundedUnaligned"):
        return "hinge", np.array(model.joints[i].extract().axis, float)
    if short == "PrismaticUnaligned":
        return "slide", np.array(model.joints[i].extract().axis, float)
    raise PlanFileError(where, "meta.urdf", "revolute, continuous, prismatic or fixed joints under the free-flyer "
                        "root (what the simulation supports)", f"joint '{model.names[i]}' of type {short}")


def _body(parent, model, i: int, where) -> ET.Element:
    """The MJCF body of Pinocchio joint ``i`` with its joint and lumped inertia."""
    placement = model.jointPlacements[i]
    body = ET.SubElement(parent, "body", name=model.names[i], pos=_fmt(placement.translation),
                         quat=_fmt(_quat_wxyz(placement.rotation)))
    inertia = model.inertias[i]
    if inertia.mass <= 1e-9:
        raise PlanFileError(where, "meta.urdf", "a positive mass on every moving body (the simulation needs it)",
                            f"no mass moves with joint '{model.names[i]}'")
    tensor = inertia.inertia
    ET.SubElement(body, "inertial", pos=_fmt(inertia.lever), mass=f"{inertia.mass:.12g}",
                  fullinertia=_fmt([tensor[0, 0], tensor[1, 1], tensor[2, 2], tensor[0, 1], tensor[0, 2],
                                    tensor[1, 2]]))
    if i == 1:
        ET.SubElement(body, "freejoint", name=model.names[i])
        return body
    kind, axis = _joint_kind(model, i, where)
    attrs = {"name": model.names[i], "type": kind, "axis": _fmt(axis)}
    lo, hi = model.lowerPositionLimit[model.idx_qs[i]], model.upperPositionLimit[model.idx_qs[i]]
    short = model.joints[i].shortname().replace("JointModel", "")
    if short not in CONTINUOUS and np.isfinite(lo) and np.isfinite(hi) and lo < hi:
        attrs.update(limited="true", range=_fmt([lo, hi]))
    ET.SubElement(body, "joint", **attrs)
    return body


def _robot_bodies(world, model, where) -> dict:
    """MJCF bodies of every joint of ``model`` (Pinocchio order), keyed by joint index."""
    bodies = {0: world}
    for i in range(1, model.njoints):
        bodies[i] = _body(bodies[model.parents[i]], model, i, where)
    return bodies


def _frame_site(bodies, model, name: str) -> None:
    frame = model.frames[model.getFrameId(name)]
    ET.SubElement(bodies[frame.parentJoint], "site", name=name, pos=_fmt(frame.placement.translation),
                  quat=_fmt(_quat_wxyz(frame.placement.rotation)), size="0.01")


@dataclass
class FootSphere:
    """One foot sphere: its contact, where it sits on the leg, the solids it meets and their friction.

    Attributes
    ----------
    contact : int
    name : str
        Geom name.
    joint : int
        Pinocchio joint the sphere moves with.
    centre : ndarray, shape (3,)
        Centre in that joint's frame [m].
    solids : list of int
        Indices of the terrain solids it collides with.
    friction : list of float
        Full friction coefficient of each of those pairs.
    """

    contact: int
    name: str
    joint: int
    centre: np.ndarray
    solids: list
    friction: list


def foot_spheres(plan, model, surfaces, radius: float) -> list:
    """The foot spheres of ``plan`` on ``surfaces`` (see the module notes), full friction per pair."""
    data = model.createData()
    intervals = stance_intervals(plan)
    out = []
    for c, name in enumerate(plan.meta["contact_frames"]):
        frame = model.frames[model.getFrameId(name)]
        own = [s for s in intervals if s.contact == c]
        first_mu = own[0].friction if own else float(np.ravel(plan.meta["friction"])[c])
        solids = {}
        for s in own:
            j = surface_under(surfaces, s.foothold) if surfaces else -1
            solids.setdefault(j, []).append(s)
        if not solids:
            solids[-1] = []
        unused = [j for j in range(len(surfaces)) if j not in solids]
        for n, (j, stances) in enumerate(solids.items()):
            first = stances[0] if stances else None
            q = plan.q[first.first] if first else plan.q[0]
            normal = first.normal if first else np.asarray(plan.meta["contact_normals"], float).reshape(-1, 3)[c]
            pin.framesForwardKinematics(model, data, q)
            joint_rot = data.oMi[frame.parentJoint].rotation
            centre = frame.placement.translation + (radius - PRELOAD) * joint_rot.T @ normal
            pairs = ([j] if j >= 0 else []) + (unused if n == 0 else [])
            mu = [stances[-1].friction if stances and p == j else first_mu for p in pairs]
            out.append(FootSphere(c, f"foot:{name}" + (f":{n}" if n else ""), frame.parentJoint, centre, pairs,
                                  list(full_value(plan.meta, "friction_reserve", np.array(mu, float)))))
    return out


def _foot_geoms(bodies, spheres, radius: float) -> None:
    for sphere in spheres:
        ET.SubElement(bodies[sphere.joint], "geom", name=sphere.name, type="sphere", size=f"{radius:.12g}",
                      pos=_fmt(sphere.centre), contype="0", conaffinity="0", mass="0", group="1",
                      rgba="0.9 0.4 0.1 1")


def _surface_geoms(world, surfaces) -> list:
    names = []
    for s in surfaces:
        name = f"terrain:{s.name}"
        attrs = {"name": name, "pos": _fmt(s.position), "quat": _fmt(_quat_wxyz(s.rotation)),
                 "contype": "0", "conaffinity": "0", "rgba": "0.6 0.6 0.6 1"}
        if s.kind == "plane":
            attrs.update(type="plane", size="5 5 0.1")
        else:
            attrs.update(type="box", size=_fmt(s.half_size))
        ET.SubElement(world, "geom", **attrs)
        names.append(name)
    return names


def scene_xml(plan, surfaces, settings: ContactSettings, frames, where="plan") -> tuple[str, object, list]:
    """MJCF text of the plan's robot on ``surfaces``, the Pinocchio model it was made from, its foot spheres."""
    model = pin.buildModelFromXML(plan.meta["urdf"], pin.JointModelFreeFlyer())
    root = ET.Element("mujoco", model="brace-simulation")
    ET.SubElement(root, "compiler", angle="radian", autolimits="true")
    ET.SubElement(root, "option", timestep=f"{settings.timestep:.12g}", gravity=_fmt(plan.meta["gravity"]),
                  integrator="implicitfast", cone=settings.cone, impratio=f"{settings.impratio:.12g}")
    ET.SubElement(root, "size", memory="20M")
    world = ET.SubElement(root, "worldbody")
    terrain = _surface_geoms(world, surfaces)
    bodies = _robot_bodies(world, model, where)
    for name in frames:
        _frame_site(bodies, model, name)
    spheres = foot_spheres(plan, model, surfaces, settings.foot_radius)
    _foot_geoms(bodies, spheres, settings.foot_radius)
    contact = ET.SubElement(root, "contact")
    solref = _fmt([settings.time_constant, settings.damping_ratio])
    for sphere in spheres:
        for j, mu in zip(sphere.solids, sphere.friction):
            ET.SubElement(contact, "pair", geom1=sphere.name, geom2=terrain[j], condim="3",
                          friction=_fmt([mu, mu, 0.0, 0.0, 0.0]), solref=solref, solimp=_fmt(settings.impedance))
    return ET.tostring(root, encoding="unicode"), model, spheres


def build_scene(plan, surfaces, settings: ContactSettings | None = None, frames=(), where="plan") -> Scene:
    """Compile the scene of ``plan`` on ``surfaces``; ``frames`` get sites (contact frames always do)."""
    settings = settings or ContactSettings()
    wanted = list(dict.fromkeys(list(plan.meta["contact_frames"]) + list(frames)))
    xml, pm, spheres = scene_xml(plan, surfaces, settings, wanted, where)
    model = mujoco.MjModel.from_xml_string(xml)
    data = mujoco.MjData(model)
    names = plan.meta["joint_names"]
    jids = [mujoco.mj_name2id(model, mujoco.mjtObj.mjOBJ_JOINT, n) for n in names]
    pin_ids = [pm.getJointId(n) for n in names]
    scene = Scene(
        model=model, data=data, xml=xml, pin_model=pm,
        joint_qpos=np.array([model.jnt_qposadr[j] for j in jids], int),
        joint_dof=np.array([model.jnt_dofadr[j] for j in jids], int),
        joint_q=np.array([pm.idx_qs[i] for i in pin_ids], int),
        continuous=np.array([pm.joints[i].shortname().replace("JointModel", "") in CONTINUOUS for i in pin_ids]),
        foot_geoms=np.array([mujoco.mj_name2id(model, mujoco.mjtObj.mjOBJ_GEOM, s.name) for s in spheres], int),
        foot_contacts=np.array([s.contact for s in spheres], int),
        sites={n: mujoco.mj_name2id(model, mujoco.mjtObj.mjOBJ_SITE, n) for n in wanted},
        surfaces=list(surfaces),
    )
    scene.set_state(plan.q[0], plan.v[0])
    return scene
