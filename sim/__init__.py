"""Wheelbench: design checks for reaction-wheel balancing devices.

Data flows one way: scenario file -> validated scenario (SI) -> mass properties ->
engine model (pybullet, DIRECT) -> control loop -> trace -> metrics and verdicts -> files.
"""

__version__ = "0.1.0"
