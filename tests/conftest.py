"""Shared fixtures: a small test device built here, independent of the demo scenarios.

The demo files in `scenarios/` and `sim/model/data/` are retuned by others; tests build their own
mapping with `scenario_dict(...)` and validate it with `make_scenario(...)`. All numbers below
are invented for tests (not a real device).
"""

from __future__ import annotations

import os
import platform
import sys


def _pin_blas_kernels() -> None:
    """Pick OpenBLAS's AVX2 (Haswell) kernels on x86-64 machines that have AVX2, before numpy loads.

    numpy's OpenBLAS chooses its kernels by the CPU it finds (DYNAMIC_ARCH): an AVX-512 machine sums a
    small matrix product in another order than an AVX2 one, so its results differ in the last bit, and a
    closed-loop trial carries that into every later row. The pin tests (tests/pins) compare traces bit for
    bit, so the suite asks for one kernel family everywhere it can run it. A user's numbers are not
    touched: this is set for the tests only, and a value already set in the environment is kept."""
    if "numpy" in sys.modules or platform.machine().lower() not in ("x86_64", "amd64"):
        return
    try:
        flags = open("/proc/cpuinfo", encoding="ascii", errors="replace").read()
    except OSError:
        return
    if " avx2" in flags and " fma" in flags:
        os.environ.setdefault("OPENBLAS_CORETYPE", "Haswell")


_pin_blas_kernels()

import copy  # noqa: E402
from pathlib import Path

import pytest
import yaml

from sim.model.overrides import deep_merge


def base_scenario() -> dict:
    """A raw scenario mapping: a 0.2 m, 50 g rod with a 100 g tip mass and a 100 g, 50 mm disk wheel
    at 0.2 m (J = 8.667e-3 kg m^2, I_w = 1.25e-4 kg m^2, mbar = 0.045 kg m), Kv 300 rpm/V
    (k_e = 0.031831 V s/rad), torque constant 0.033 N m/A, 2 ohm, 12 V.

    The torque constant is 3.7% above k_e on purpose: a datasheet's torque constant often differs
    from its back-EMF constant by a few percent (common practice, no source), and a formula that
    uses one where the other belongs must show in the tests.

    No friction, no sensor imperfections, a fixed-voltage bench strategy at 0 V, 0.5 s long.
    """
    return {
        "name": "test pendulum",
        "world": {"gravity": 9.81, "step": 0.001},
        "body": {
            "parts": [
                {"name": "arm", "shape": "rod", "length": 0.2, "mass": 0.05, "at": 0.1},
                {"name": "tip", "shape": "point", "mass": 0.1, "at": 0.2},
            ],
        },
        "wheel": {
            "at": 0.2,
            "parts": [{"name": "disk", "shape": "disk", "radius": 0.05, "thickness": 0.005, "mass": 0.1}],
        },
        "motor": {"speed_constant": "300 rpm/V", "torque_constant": "0.033 N*m/A", "resistance": 2.0, "mass": 0.0},
        "drive": {"supply": 12.0},
        "strategy": {"kind": "fixed_voltage", "volts": 0.0},
        "trial": {"duration": 0.5, "start": {"angle": 0.0}},
    }


def scenario_dict(**sections) -> dict:
    """The test mapping with sections merged in, e.g. scenario_dict(drive={"supply": 24}).

    `strategy` replaces the whole strategy mapping (parameters of one kind do not fit another).
    """
    out = deep_merge(base_scenario(), {k: v for k, v in sections.items() if k != "strategy"})
    if "strategy" in sections:
        out["strategy"] = copy.deepcopy(sections["strategy"])
    return out


def make_scenario(**sections):
    """A validated `Scenario` from the test mapping with `sections` merged in."""
    from sim.model.scenario import validate_scenario

    return validate_scenario(scenario_dict(**sections), where="<test scenario>")


def write_scenario(path: Path, mapping: dict) -> Path:
    """Write `mapping` as YAML to `path` and return the path."""
    path.write_text(yaml.safe_dump(mapping, sort_keys=False), encoding="utf-8")
    return path


@pytest.fixture
def scenario_file(tmp_path) -> Path:
    """The test scenario written to a YAML file in a fresh temporary folder."""
    return write_scenario(tmp_path / "test.yaml", base_scenario())


@pytest.fixture(scope="session", autouse=True)
def firmware_cache(tmp_path_factory):
    """Firmware builds of the test session go to a temporary cache folder, never the user's."""
    import os

    from sim.strategies.firmware.build import CACHE_ENV
    folder = tmp_path_factory.mktemp("firmware-cache")
    before = os.environ.get(CACHE_ENV)
    os.environ[CACHE_ENV] = str(folder)
    yield folder
    if before is None:
        os.environ.pop(CACHE_ENV, None)
    else:
        os.environ[CACHE_ENV] = before


def make_scenario3d(wheels: list, **sections):
    """A validated 3D `Scenario`: the test mapping with `wheels:` instead of `wheel:` and `sections` merged in."""
    from sim.model.scenario import validate_scenario

    raw = scenario_dict(**sections)
    raw.pop("wheel")
    raw["wheels"] = copy.deepcopy(wheels)
    return validate_scenario(raw, where="<test scenario>")


def timeless(value):
    """`value` (metrics, a verdict) without wall-clock entries: they measure the machine, not the model."""
    if isinstance(value, dict):
        return {k: timeless(v) for k, v in value.items() if k != "real_time_factor" and "wall" not in k}
    if isinstance(value, list):
        return [timeless(v) for v in value]
    return value
