"""The core layer: what every other layer may use and which uses nothing of sim's (errors, units,
angles, the strategy time budget, safe file writing, option checks, text and YAML reading,
validation messages, process isolation, safety cautions, the progress bar).

Layers and which way imports flow: DEVELOPERS.md, "Package layout".
"""
