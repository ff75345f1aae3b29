"""Replaying a plan in a physics engine (MuJoCo), with pushes at the hand.

Reads plan files only (like the analysis layer) and needs the optional
``mujoco`` package (``pip install 'brace-planner[sim]'``):

- :mod:`.surfaces`   the task's terrain as planes and boxes (no MuJoCo);
- :mod:`.stances`    the plan's contact schedule as stance intervals (which
  foot is judged when, against which foothold);
- :mod:`.scene`      MJCF of the robot (from the plan's URDF through
  Pinocchio) and the terrain; state conversion between the two layouts;
- :mod:`.reference`  the plan as a reference between knots, PD gains per knot,
  the swing legs' world-frame paths and the informed-mode torque gains;
- :mod:`.rollout`    the stepping loop, the controller and what it records;
- :mod:`.pushes`     nominal replay and the largest survived push (bisection).
"""
