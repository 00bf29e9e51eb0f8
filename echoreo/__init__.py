"""echoreo: imitation studies with a robot demonstrator.

The distribution is split into namespaced subpackages that mirror the
repository's top-level folders:

``echoreo``           this core: version, the error family, located YAML,
                      the session-file schema and reader (imports nothing of ours)
``echoreo.sim``       robot model, kinematics, virtual sensors and participants
``echoreo.adapters``  leader and follower interfaces (simulated, ZeroMQ, file import)
``echoreo.runner``    choreographies, session plans, clock, recorder, command line
``echoreo.scoring``   state-space reconstruction, metrics, grades, cohort statistics

Imports point down only: runner -> adapters -> sim -> core; scoring -> sim -> core.
"""

from echoreo._version import __version__

__all__ = ["__version__"]
