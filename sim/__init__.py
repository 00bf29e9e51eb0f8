"""echoreo.sim: robot model, kinematics, virtual sensors, leader and participants.

Imports numpy, scipy, pyyaml and the echoreo core only.

Public names: ``_EXPORTS`` below, imported on first use (``echoreo._lazy``).
"""

from __future__ import annotations

from echoreo._lazy import lazy_exports

#: public name -> submodule of this package that defines it
_EXPORTS: dict[str, str] = {
    "human_model": "human",
    "human_model_yaml": "human",
    "segment_lengths": "human",
    "SEGMENT_FRACTIONS": "human",
    "RANGE_OF_MOTION_DEG": "human",
    "ImitationProfile": "participant",
    "PROFILES": "participant",
    "DEGRADATIONS": "participant",
    "degrade": "participant",
    "vary_profile": "participant",
    "SimStream": "participant",
    "ParticipantRecording": "participant",
    "simulate_participant": "participant",
    "Robot": "_robotmodel",
    "load_robot": "robot",
    "parse_robot": "robot",
    "shipped_robots": "robot",
    "HeadPose": "sensors",
    "ImuNoise": "sensors",
    "STANDARD_GRAVITY": "sensors",
    "head_orientation": "sensors",
    "imu": "sensors",
    "imus": "sensors",
    "joint_derivatives": "sensors",
    "LeaderSim": "leader",
    "SAFETY_CAUTION": "draw",
    "StickFigure": "draw",
    "render_gif": "draw",
    "render_strip": "draw",
    "skeleton": "draw",
}

__all__ = sorted(_EXPORTS)


__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
