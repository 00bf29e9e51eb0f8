"""echoreo.sim: robot model, kinematics, virtual sensors, leader and participants.

Imports numpy, scipy and the echoreo core only.
"""

__all__: list[str] = []
