"""The model layer: the scenario (schema, loading, overrides, edits, tolerances), materials, mass
properties and the device's lumped SI figures.

Layers and which way imports flow: DEVELOPERS.md, "Package layout".
"""
