"""Terrain generators: footholds lie on the described surfaces, normals are unit and face the robot.

References: the normal of a surface z = f(x, y) is (-f_x, -f_y, 1) / norm
(textbook differential geometry), here checked against finite differences of
the generated footholds; a plane inclined at angle theta has a normal at
angle theta from the vertical (textbook geometry).
"""
import math

import numpy as np
import pytest

from optimizer.errors import TaskError
from optimizer.problem.terrain import TERRAINS, build_terrain
from optimizer.schema import Fields

TERRAIN_SPECS = {kind: cls.EXAMPLE for kind, cls in TERRAINS.items()}


def terrain(spec):
    return build_terrain(Fields(spec, "t.yaml", "stance.terrain", TaskError))


# Unit normals perpendicular to the surface, for every registered kind: tests/test_registry_contracts.py


def test_ceiling_normal_points_down_into_the_robot_beneath():
    ground = terrain(TERRAIN_SPECS["ceiling"])
    up = ground.place([0.3, 0.1], "ceiling", "f")
    np.testing.assert_allclose(up.foothold, [0.3, 0.1, 0.7], atol=1e-12)
    np.testing.assert_allclose(up.normal, [0.0, 0.0, -1.0], atol=1e-12)
    assert up.friction == 0.9
    down = ground.place([0.3, 0.1], None, "f")
    assert down.foothold[2] == 0.0 and down.normal[2] == 1.0 and down.friction == 0.8


def test_ramp_normal_makes_the_slope_angle_with_the_vertical():
    # Textbook geometry: a plane inclined at theta has its normal theta from the vertical,
    # tilted against the uphill direction.
    ground = terrain(TERRAIN_SPECS["ramp"])
    place = ground.place([0.4, 0.3], None, "f")
    assert math.degrees(math.acos(place.normal[2])) == pytest.approx(25.0, abs=1e-9)
    uphill = np.array([1.0, 1.0]) / math.sqrt(2)
    assert place.normal[:2] @ uphill < 0
    rise = math.tan(math.radians(25.0)) * (np.array([0.4, 0.3]) - [0.1, -0.2]) @ uphill
    assert place.foothold[2] == pytest.approx(0.05 + rise, abs=1e-12)


def test_trench_walls_face_each_other():
    ground = terrain(TERRAIN_SPECS["trench"])
    left, right = ground.place([0.0, 0.3], None, "f"), ground.place([0.0, -0.3], None, "f")
    assert left.normal[1] < 0 < right.normal[1]        # each wall leans toward the other
    np.testing.assert_allclose(left.normal * [1, -1, 1], right.normal, atol=1e-12)
    assert left.foothold[2] == pytest.approx(math.tan(math.radians(30.0)) * 0.25, abs=1e-12)
    assert (left.friction, right.friction) == (0.5, 0.6)
    assert ground.place([0.0, 0.02], None, "f").surface == "bottom"


def test_blocks_put_feet_on_the_highest_top_and_reject_edges():
    ground = terrain(TERRAIN_SPECS["blocks"])
    assert ground.place([0.5, 0.3], None, "f").foothold[2] == 0.2
    assert ground.place([0.0, 0.3], None, "f").foothold[2] == 0.0
    with pytest.raises(TaskError, match=r"at least 0.03 m from every block edge"):
        ground.place([0.29, 0.0], None, "stance.feet.foot_fl")


@pytest.mark.parametrize("spec, match", [
    ({"kind": "ramps"}, r"kind.*one of flat, blocks, ramp, trench, ceiling.*did you mean 'ramp'"),
    ({"kind": "ramp", "slope_deg": 20, "friction": 0.0}, r"friction.*a number > 0"),
    ({"kind": "ramp", "slope_deg": 20, "friction": 0.5, "uphil": [1, 0]}, r"uphil.*did you mean 'uphill'"),
    ({"kind": "ramp", "slope_deg": 20, "friction": 0.5, "uphill": [0, 0]}, r"uphill.*non-zero horizontal direction"),
    ({"kind": "ceiling", "ceiling_height": -0.1, "friction": 0.5}, r"ceiling_height.*a height above floor_height"),
    ({"kind": "trench", "slope_deg": 20, "friction": {"left": 0.5}}, r"friction.right.*required"),
])
def test_bad_terrain_parameters_are_named(spec, match):
    with pytest.raises(TaskError, match=match):
        terrain(spec)


def test_named_surface_must_match_the_ground_under_the_foot():
    ground = terrain(TERRAIN_SPECS["trench"])
    with pytest.raises(TaskError, match=r"feet.foot_fl.*left surface.*lies on right"):
        ground.place([0.0, -0.3], "left", "feet.foot_fl")
    with pytest.raises(TaskError, match=r"feet.foot_fl.surface.*one of the surfaces left, right, bottom"):
        ground.place([0.0, -0.3], "roof", "feet.foot_fl")
