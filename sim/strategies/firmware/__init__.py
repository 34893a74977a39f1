"""Firmware in the loop: C code written against `wheelbench.h`, compiled with cffi, run as a strategy.

`build` compiles and caches; `strategy` is the `firmware` strategy kind and the printf log hook.
"""

from .build import HEADER, Build, FirmwareBuildError, build_firmware, cache_dir, load_fresh
from .strategy import FirmwareStrategy, firmware_log_for, firmware_log_to

__all__ = ["HEADER", "Build", "FirmwareBuildError", "FirmwareStrategy", "build_firmware", "cache_dir",
           "firmware_log_for", "firmware_log_to", "load_fresh"]
