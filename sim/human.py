"""A kinematic model of the human upper body, scaled to body height.

:func:`human_model` builds a :class:`~echoreo.sim.robot.Robot` with the same
joint names, sign conventions and body sites as the robots (see
``choreographies/FORMAT.md`` section 1), so that a leader's joint angles can
be copied onto a person by name. The model is generated as robot-description
YAML text and parsed by :func:`echoreo.sim.parse_robot`; the text is kept in
``Robot.text`` like any robot's.

Geometry (frames of ROS REP 103: x forward, y left, z up; base on the floor
below the midpoint between the shoulders of a person standing upright, arms
hanging at q = 0):

* shoulder joint centres at height :math:`0.818 H`, :math:`\\pm 0.259 H / 2`
  to the side; the three shoulder axes intersect there (a ball joint, unlike
  the robot's offset servo axes);
* elbow :math:`0.186 H` below the shoulder, wrist site :math:`0.146 H` below
  the elbow on the forearm;
* both neck joints at chin height :math:`0.870 H` (the lower end of the
  head segment in the table, taken as the pivot), the head site at eye
  height :math:`0.936 H` on the midline;
* chest site at :math:`0.720 H` on the midline.

The fractions of body height :math:`H` are :data:`SEGMENT_FRACTIONS`, the
ranges of motion :data:`RANGE_OF_MOTION_DEG`.

References
----------
.. [1] Drillis, R., & Contini, R. (1966). *Body segment parameters*.
   Technical Report 1166-03, Office of Vocational Rehabilitation, Department
   of Health, Education and Welfare; New York University School of
   Engineering and Science.
.. [2] Winter, D. A. (2009). *Biomechanics and Motor Control of Human
   Movement* (4th ed.), Fig. 4.1 (segment lengths as fractions of body
   height, after [1]). Wiley.
.. [3] Greene, W. B., & Heckman, J. D. (Eds.) (1994). *The Clinical
   Measurement of Joint Motion*. American Academy of Orthopaedic Surgeons.
.. [4] Youdas, J. W., Garrett, T. R., Suman, V. J., Bogard, C. L., Hallman,
   H. O., & Carey, J. R. (1992). Normal range of motion of the cervical
   spine: an initial goniometric study. *Physical Therapy*, 72(11), 770-780.
"""

from __future__ import annotations

from functools import lru_cache

from echoreo.errors import InputError
from echoreo.sim.robot import Robot, parse_robot

__all__ = [
    "RANGE_OF_MOTION_DEG",
    "SEGMENT_FRACTIONS",
    "human_model",
    "human_model_yaml",
    "segment_lengths",
]

#: Segment lengths and landmark heights as fractions of body height H,
#: after Drillis & Contini (1966) as reproduced in Winter (2009), Fig. 4.1.
#: All values are quoted from memory of that figure: upper arm, forearm,
#: hand, shoulder width and shoulder height were also given with the task;
#: the others (chin, eye, chest, elbow, wrist heights, head height) are from
#: memory alone and should be checked against the book. The heights are
#: internally consistent: shoulder - upper arm = 0.632 ~ elbow 0.630, elbow
#: - forearm = 0.484 ~ wrist 0.485.
SEGMENT_FRACTIONS: dict[str, float] = {
    "upper_arm": 0.186,        # shoulder to elbow
    "forearm": 0.146,          # elbow to wrist
    "hand": 0.108,             # wrist to fingertip
    "shoulder_width": 0.259,   # between the shoulder joints (biacromial)
    "shoulder_height": 0.818,  # floor to shoulder joint, standing
    "chin_height": 0.870,      # floor to chin
    "eye_height": 0.936,       # floor to eyes
    "chest_height": 0.720,     # floor to nipple line
    "elbow_height": 0.630,     # floor to elbow, arm hanging
    "wrist_height": 0.485,     # floor to wrist, arm hanging
    "head_height": 0.130,      # chin to vertex
}

#: Ranges of motion (deg, anatomical signs of FORMAT.md section 1: lower =
#: extension / adduction / external rotation / supination). Arm values after
#: the AAOS tables (Greene & Heckman 1994), neck after Youdas et al. (1992),
#: all from memory and rounded: shoulder flexion 180, extension 60,
#: abduction 180, adduction (across the front) 30, internal rotation 70,
#: external rotation 90; elbow flexion 150; pronation and supination 80;
#: cervical rotation 75 each way, flexion 50, extension 60.
RANGE_OF_MOTION_DEG: dict[str, tuple[float, float]] = {
    "neck_rotation": (-75.0, 75.0),
    "neck_flexion": (-60.0, 50.0),
    "shoulder_flexion": (-60.0, 180.0),
    "shoulder_abduction": (-30.0, 180.0),
    "shoulder_rotation": (-90.0, 70.0),
    "elbow_flexion": (0.0, 150.0),
    "forearm_rotation": (-80.0, 80.0),
}

# Speed and acceleration bounds of the human joints: generous round numbers so
# that no plausible human movement exceeds them (not measured limits; the
# participant simulation does not use them).
_VEL_DEG_S = 1500.0
_ACC_DEG_S2 = 30000.0

# Rest posture of the model (deg): arms hanging a little away from the body,
# elbows slightly bent, head level (our choice).
_REST_DEG = {"shoulder_abduction": 5.0, "elbow_flexion": 10.0}


def segment_lengths(height_m: float) -> dict[str, float]:
    """Segment lengths and landmark heights of a person, m.

    .. math:: L_s = f_s \\, H

    with the fractions :math:`f_s` of :data:`SEGMENT_FRACTIONS`
    (Drillis & Contini 1966, in Winter 2009, Fig. 4.1).

    Parameters
    ----------
    height_m : float, m
        Body height :math:`H`.

    Returns
    -------
    dict of str to float, m
    """
    _check_height(height_m)
    return {k: f * float(height_m) for k, f in SEGMENT_FRACTIONS.items()}


def human_model_yaml(height_m: float) -> str:
    """Robot-description YAML text (FORMAT.md section 1) of the human model.

    Parameters
    ----------
    height_m : float, m

    Returns
    -------
    str
    """
    L = segment_lengths(height_m)
    half = L["shoulder_width"] / 2.0
    neck_z = L["chin_height"]
    head_dz = L["eye_height"] - L["chin_height"]
    lines = [
        "# Human upper body generated by echoreo.sim.human.human_model_yaml.",
        "# Segment lengths: Drillis & Contini (1966) in Winter (2009), Fig. 4.1.",
        "format: echoreo-robot/1",
        f"name: human-{height_m * 100:.0f}cm",
        "description: >",
        f"  Kinematic human upper body of height {height_m:.3f} m, segment lengths as",
        "  fractions of body height (Drillis & Contini 1966, in Winter 2009, Fig. 4.1).",
        "units: {length: m, angle: deg, velocity: deg/s, acceleration: deg/s^2}",
        "base: trunk",
        "joints:",
    ]

    def joint(name: str, parent: str, child: str, xyz: tuple[float, float, float],
              axis: tuple[int, int, int], rom: str) -> None:
        lo, hi = RANGE_OF_MOTION_DEG[rom]
        lines.extend([
            f"  {name}:",
            f"    parent: {parent}",
            f"    child: {child}",
            f"    origin: {{xyz: [{xyz[0]:.6f}, {xyz[1]:.6f}, {xyz[2]:.6f}]}}",
            f"    axis: [{axis[0]}, {axis[1]}, {axis[2]}]",
            f"    limits: {{lower: {lo:g}, upper: {hi:g}, velocity: {_VEL_DEG_S:g}, "
            f"acceleration: {_ACC_DEG_S2:g}}}",
        ])

    joint("neck_rotation", "trunk", "neck", (0.0, 0.0, neck_z), (0, 0, 1), "neck_rotation")
    joint("neck_flexion", "neck", "head", (0.0, 0.0, 0.0), (0, 1, 0), "neck_flexion")
    for side, s in (("left", 1), ("right", -1)):
        # Axes as on the robots, so that the anatomical signs agree (FORMAT.md):
        # flexion about -y, abduction about +x (left) / -x (right), rotation
        # and pronation about -z (left) / +z (right), elbow flexion about -y.
        joint(f"{side}_shoulder_flexion", "trunk", f"{side}_shoulder",
              (0.0, s * half, L["shoulder_height"]), (0, -1, 0), "shoulder_flexion")
        joint(f"{side}_shoulder_abduction", f"{side}_shoulder", f"{side}_upper_arm_root",
              (0.0, 0.0, 0.0), (s, 0, 0), "shoulder_abduction")
        joint(f"{side}_shoulder_rotation", f"{side}_upper_arm_root", f"{side}_upper_arm",
              (0.0, 0.0, 0.0), (0, 0, -s), "shoulder_rotation")
        joint(f"{side}_elbow_flexion", f"{side}_upper_arm", f"{side}_forearm_root",
              (0.0, 0.0, -L["upper_arm"]), (0, -1, 0), "elbow_flexion")
        joint(f"{side}_forearm_rotation", f"{side}_forearm_root", f"{side}_forearm",
              (0.0, 0.0, 0.0), (0, 0, -s), "forearm_rotation")
    lines.extend([
        "sites:",
        f"  chest: {{link: trunk, xyz: [0.0, 0.0, {L['chest_height']:.6f}]}}",
        f"  head: {{link: head, xyz: [0.0, 0.0, {head_dz:.6f}]}}",
        f"  left_wrist: {{link: left_forearm, xyz: [0.0, 0.0, {-L['forearm']:.6f}]}}",
        f"  right_wrist: {{link: right_forearm, xyz: [0.0, 0.0, {-L['forearm']:.6f}]}}",
        "rest:",
    ])
    for side in ("left", "right"):
        for rom, deg in _REST_DEG.items():
            lines.append(f"  {side}_{rom}: {deg:g}")
    return "\n".join(lines) + "\n"


def human_model(height_m: float) -> Robot:
    """Kinematic human upper body of the given height.

    Same joint names, sign conventions and sites (``left_wrist``,
    ``right_wrist``, ``head``, ``chest``) as the robots; segment lengths
    :math:`L_s = f_s H` from Drillis & Contini (1966) as reproduced in
    Winter (2009), Fig. 4.1; ranges of motion from the AAOS tables (Greene &
    Heckman 1994) and Youdas et al. (1992). Models are cached by height (a
    :class:`~echoreo.sim.robot.Robot` is read-only).

    Parameters
    ----------
    height_m : float, m
        Body height, 0.5-2.5 m.

    Returns
    -------
    Robot
    """
    _check_height(height_m)
    return _cached_model(round(float(height_m), 6))


@lru_cache(maxsize=32)
def _cached_model(height_m: float) -> Robot:
    return parse_robot(human_model_yaml(height_m), source=f"human_model({height_m:g})")


def _check_height(height_m: float) -> None:
    h = float(height_m)
    if not (0.5 <= h <= 2.5):
        raise InputError(f"body height {height_m!r} m is outside 0.5-2.5 m",
                         hint="give the participant's height in metres, e.g. 1.70")
