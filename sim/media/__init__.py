"""The media layer: plots, the 3D scene, the instrument panel and clip writing. They draw what they
are given; they run nothing.

Layers and which way imports flow: DEVELOPERS.md, "Package layout".
"""
