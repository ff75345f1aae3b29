"""Rotation and rigid-motion helpers on CasADi SX expressions.

Conventions follow Pinocchio so symbolic and numeric results can be compared
entry by entry:

* quaternions are stored ``[x, y, z, w]`` (scalar last);
* a spatial motion or twist is ``(linear, angular)``, each shape (3, 1);
* a placement ``(R, p)`` maps child coordinates to parent coordinates,
  ``x_parent = R @ x_child + p``.

Every function that divides by a rotation angle switches to a Taylor series
below a small angle with ``ca.if_else``. The exact branch is fed a "safe"
angle in that region, so neither branch produces NaN or infinity and the
derivatives at zero rotation stay finite.
"""
from __future__ import annotations

import casadi as ca
import numpy as np

#: Squared angle (rad^2) below which Taylor series replace closed forms.
SMALL_ANGLE_SQUARED = 1e-4

#: Ratio |vector part|^2 / w^2 of a quaternion below which its log uses a series.
SMALL_QUATERNION_RATIO = 1e-5


def skew(w):
    """Cross-product matrix: ``skew(w) @ x == cross(w, x)``.

    Parameters
    ----------
    w : casadi.SX or array-like, shape (3,) or (3, 1)

    Returns
    -------
    casadi.SX, shape (3, 3)
    """
    w = ca.SX(w) if not isinstance(w, ca.SX) else w
    return ca.vertcat(
        ca.horzcat(0, -w[2], w[1]),
        ca.horzcat(w[2], 0, -w[0]),
        ca.horzcat(-w[1], w[0], 0),
    )


def _series_or_exact(theta2, series, exact):
    """Pick a Taylor series below ``SMALL_ANGLE_SQUARED``, else the closed form.

    ``series(theta2)`` is polynomial in the squared angle; ``exact(theta2)`` is
    evaluated at a safe value (1) inside the small-angle region so it never
    produces NaN there, in values or derivatives.
    """
    small = theta2 < SMALL_ANGLE_SQUARED
    safe = ca.if_else(small, 1.0, theta2)
    return ca.if_else(small, series(theta2), exact(safe))


def _sin_half_over_angle(t2):
    """``sin(theta/2) / theta`` as a function of ``theta^2``."""
    return _series_or_exact(
        t2, lambda t: 0.5 - t / 48 + t**2 / 3840,
        lambda t: ca.sin(ca.sqrt(t) / 2) / ca.sqrt(t))


def _cos_half(t2):
    """``cos(theta/2)`` as a function of ``theta^2``."""
    return _series_or_exact(
        t2, lambda t: 1 - t / 8 + t**2 / 384, lambda t: ca.cos(ca.sqrt(t) / 2))


def _sin_over_angle(t2):
    """``sin(theta) / theta`` as a function of ``theta^2``."""
    return _series_or_exact(
        t2, lambda t: 1 - t / 6 + t**2 / 120, lambda t: ca.sin(ca.sqrt(t)) / ca.sqrt(t))


def _one_minus_cos_over_angle2(t2):
    """``(1 - cos(theta)) / theta^2`` (written with sin^2 to avoid cancellation)."""
    return _series_or_exact(
        t2, lambda t: 0.5 - t / 24 + t**2 / 720,
        lambda t: 2 * ca.sin(ca.sqrt(t) / 2) ** 2 / t)


def _angle_minus_sin_over_angle3(t2):
    """``(theta - sin(theta)) / theta^3``."""
    return _series_or_exact(
        t2, lambda t: 1.0 / 6 - t / 120 + t**2 / 5040,
        lambda t: (ca.sqrt(t) - ca.sin(ca.sqrt(t))) / (t * ca.sqrt(t)))


def _log_translation_coefficient(t2):
    """``(1 - (theta/2) cot(theta/2)) / theta^2``, valid for theta < 2 pi."""
    def exact(t):
        half = ca.sqrt(t) / 2
        return (1 - half * ca.cos(half) / ca.sin(half)) / t
    return _series_or_exact(t2, lambda t: 1.0 / 12 + t / 720 + t**2 / 30240, exact)


def rotation_about_axis(axis, cos_angle, sin_angle):
    """Rotation about a fixed unit axis, given the cosine and sine of the angle.

    ``R = c I + s [a]x + (1 - c) a a^T`` built entry by entry, so a principal
    axis yields the minimal expression (no ``c + (1 - c)`` terms).

    Parameters
    ----------
    axis : array-like, shape (3,)
        Unit axis, numeric.
    cos_angle, sin_angle : casadi.SX scalar

    Returns
    -------
    casadi.SX, shape (3, 3)
    """
    a = np.asarray(axis, dtype=float).reshape(3)
    k = np.array([[0, -a[2], a[1]], [a[2], 0, -a[0]], [-a[1], a[0], 0]])
    outer = np.outer(a, a)
    rows = []
    for i in range(3):
        row = []
        for j in range(3):
            constant = float(outer[i, j])
            cos_coef = float((i == j) - outer[i, j])
            sin_coef = float(k[i, j])
            row.append(constant + cos_coef * cos_angle + sin_coef * sin_angle)
        rows.append(ca.horzcat(*row))
    return ca.vertcat(*rows)


def rotation_from_quaternion(quat):
    """Rotation matrix of a unit quaternion ``[x, y, z, w]``.

    Same polynomial as Eigen's ``Quaternion::toRotationMatrix`` (used by
    Pinocchio); it assumes a unit quaternion and does not normalize.

    Returns
    -------
    casadi.SX, shape (3, 3)
    """
    x, y, z, w = quat[0], quat[1], quat[2], quat[3]
    return ca.vertcat(
        ca.horzcat(1 - 2 * (y * y + z * z), 2 * (x * y - z * w), 2 * (x * z + y * w)),
        ca.horzcat(2 * (x * y + z * w), 1 - 2 * (x * x + z * z), 2 * (y * z - x * w)),
        ca.horzcat(2 * (x * z - y * w), 2 * (y * z + x * w), 1 - 2 * (x * x + y * y)),
    )


def quaternion_from_rotation(rot):
    """Unit quaternion ``[x, y, z, w]`` of a rotation matrix (Shepperd's method).

    The branch with the largest pivot (trace or a diagonal entry) is chosen
    with ``ca.if_else``; the sign of the result is not normalized (q and -q
    are the same rotation).

    Parameters
    ----------
    rot : casadi.SX, shape (3, 3)

    Returns
    -------
    casadi.SX, shape (4, 1)
    """
    r = rot

    def branch(pivot_arg, build):
        s = 2 * ca.sqrt(ca.fmax(pivot_arg, 1e-12))
        return build(s)

    trace = r[0, 0] + r[1, 1] + r[2, 2]
    from_w = branch(1 + trace, lambda s: ca.vertcat(
        (r[2, 1] - r[1, 2]) / s, (r[0, 2] - r[2, 0]) / s, (r[1, 0] - r[0, 1]) / s, s / 4))
    from_x = branch(1 + r[0, 0] - r[1, 1] - r[2, 2], lambda s: ca.vertcat(
        s / 4, (r[0, 1] + r[1, 0]) / s, (r[0, 2] + r[2, 0]) / s, (r[2, 1] - r[1, 2]) / s))
    from_y = branch(1 + r[1, 1] - r[0, 0] - r[2, 2], lambda s: ca.vertcat(
        (r[0, 1] + r[1, 0]) / s, s / 4, (r[1, 2] + r[2, 1]) / s, (r[0, 2] - r[2, 0]) / s))
    from_z = branch(1 + r[2, 2] - r[0, 0] - r[1, 1], lambda s: ca.vertcat(
        (r[0, 2] + r[2, 0]) / s, (r[1, 2] + r[2, 1]) / s, s / 4, (r[1, 0] - r[0, 1]) / s))
    x_or_yz = ca.if_else(
        ca.logic_and(r[0, 0] >= r[1, 1], r[0, 0] >= r[2, 2]), from_x,
        ca.if_else(r[1, 1] >= r[2, 2], from_y, from_z))
    return ca.if_else(trace > 0, from_w, x_or_yz)


def quaternion_multiply(a, b):
    """Hamilton product ``a * b`` of quaternions ``[x, y, z, w]``; shape (4, 1)."""
    av, aw = a[0:3], a[3]
    bv, bw = b[0:3], b[3]
    vec = aw * bv + bw * av + ca.cross(av, bv)
    return ca.vertcat(vec, aw * bw - ca.dot(av, bv))


def quaternion_conjugate(quat):
    """``[-x, -y, -z, w]``: the inverse of a unit quaternion; shape (4, 1)."""
    return ca.vertcat(-quat[0:3], quat[3])


def quaternion_exp(w):
    """Unit quaternion of the rotation vector ``w`` (angle |w|, rad, axis w/|w|).

    Returns
    -------
    casadi.SX, shape (4, 1)
        ``[sin(theta/2) w/theta, cos(theta/2)]``, smooth at ``w = 0``.
    """
    t2 = ca.dot(w, w)
    return ca.vertcat(_sin_half_over_angle(t2) * w, _cos_half(t2))


def quaternion_log(quat):
    """Rotation vector (rad) of a quaternion ``[x, y, z, w]``, angle in [0, pi].

    The quaternion need not be unit (the angle is ``2 atan2(|xyz|, |w|)``).
    The sign is chosen so ``q`` and ``-q`` give the same vector.

    Returns
    -------
    casadi.SX, shape (3, 1)
    """
    sign = ca.if_else(quat[3] >= 0, 1.0, -1.0)
    vec = sign * quat[0:3]
    c = sign * quat[3]
    s2 = ca.dot(vec, vec)
    small = s2 < SMALL_QUATERNION_RATIO * c * c
    safe_s2 = ca.if_else(small, 1.0, s2)
    safe_c = ca.if_else(small, c, 1.0)
    ratio = s2 / (safe_c * safe_c)
    series = 2 / safe_c * (1 - ratio / 3 + ratio**2 / 5)
    exact = 2 * ca.atan2(ca.sqrt(safe_s2), c) / ca.sqrt(safe_s2)
    return ca.if_else(small, series, exact) * vec


def rotation_exp(w):
    """Rotation matrix ``exp([w]x)`` (Rodrigues), smooth at ``w = 0``; shape (3, 3)."""
    t2 = ca.dot(w, w)
    k = skew(w)
    return ca.SX.eye(3) + _sin_over_angle(t2) * k + _one_minus_cos_over_angle2(t2) * (k @ k)


def rotation_log(rot):
    """Rotation vector (rad) of a rotation matrix, via its quaternion; shape (3, 1)."""
    return quaternion_log(quaternion_from_rotation(rot))


def exp_translation_matrix(w):
    """Matrix ``V(w)`` with ``exp6([v; w]).translation = V(w) v``; shape (3, 3).

    ``V = I + (1 - cos t)/t^2 [w]x + (t - sin t)/t^3 [w]x^2`` with ``t = |w|``.
    """
    t2 = ca.dot(w, w)
    k = skew(w)
    return (ca.SX.eye(3) + _one_minus_cos_over_angle2(t2) * k
            + _angle_minus_sin_over_angle3(t2) * (k @ k))


def log_translation_matrix(w):
    """Inverse of :func:`exp_translation_matrix`, ``V(w)^-1``; shape (3, 3).

    ``V^-1 = I - [w]x / 2 + (1 - (t/2) cot(t/2)) / t^2 [w]x^2``, valid for |w| < 2 pi.
    """
    t2 = ca.dot(w, w)
    k = skew(w)
    return ca.SX.eye(3) - 0.5 * k + _log_translation_coefficient(t2) * (k @ k)


def motion_act_inverse(rot, pos, lin, ang):
    """Express a motion given in the parent frame in the child frame.

    ``(R, p)`` is the child placement in the parent frame. Returns
    ``(R^T (v - p x w), R^T w)``, each shape (3, 1).
    """
    return rot.T @ (lin - ca.cross(pos, ang)), rot.T @ ang


def force_act(rot, pos, lin, ang):
    """Express a force given in the child frame in the parent frame.

    Returns ``(R f, R n + p x R f)``, each shape (3, 1).
    """
    f = rot @ lin
    return f, rot @ ang + ca.cross(pos, f)


def motion_cross_motion(v_lin, v_ang, m_lin, m_ang):
    """Spatial cross product ``v x m`` of two motions; returns (lin, ang)."""
    return ca.cross(v_ang, m_lin) + ca.cross(v_lin, m_ang), ca.cross(v_ang, m_ang)


def motion_cross_force(v_lin, v_ang, f_lin, f_ang):
    """Spatial cross product ``v x* f`` of a motion and a force; returns (lin, ang)."""
    return ca.cross(v_ang, f_lin), ca.cross(v_ang, f_ang) + ca.cross(v_lin, f_lin)
