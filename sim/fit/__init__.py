"""The fit layer: bench logs, the fits of the model to them, and their output files.

Layers and which way imports flow: DEVELOPERS.md, "Package layout".
"""
