"""The run layer: one trial (loop, trace, metrics, causes), many trials in parallel, one run to files.

Layers and which way imports flow: DEVELOPERS.md, "Package layout".
"""
