"""The physics layer: the pybullet engine, the motor and drive, the sensors.

Layers and which way imports flow: DEVELOPERS.md, "Package layout".
"""
