"""The studies built on runs: check and its verdicts, runaway, burst, thermal, sweep, catch map,
tune, gains.

Layers and which way imports flow: DEVELOPERS.md, "Package layout".
"""
