"""Strategy kind `firmware`: the team's C code, compiled against `wheelbench.h`, as the balance law.

Scenario: `strategy: {kind: firmware, sources: [a.c, ...], include: [dir, ...], defines: {NAME: value},
cflags: [...]}`; paths relative to the scenario file. The sources are compiled when the scenario
loads (`validate` too), so firmware that does not compile is bad input before anything runs.

Each trial loads a fresh copy of the build (fresh static variables: `build.load_fresh`) and, being marked `isolated`,
runs in the forked isolation child (`sim.core.isolation`): a crash or a call that never returns ends
the trial as strategy_failed at that tick. printf output goes to the file named by
`firmware_log_to` (the `run` command's firmware.log), else nowhere.
"""

from __future__ import annotations

import contextlib
import faulthandler
import math
import os
import re
from pathlib import Path
from typing import Annotated, ClassVar, Literal

from pydantic import Field, PrivateAttr, field_validator, model_validator

from ...core.errors import StrategyError
from ..base import Reading, Strategy, StrategyParams
from .build import Build, build_firmware, load_fresh

_C_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")
_LOG = {"path": None, "pid": None}   # where the child sends printf: set by `firmware_log_to` around a trial
MAX_SOURCES = 200
_IMPORT_PID = os.getpid()   # a trial in another process than this (and the log's setter) runs in a child


@contextlib.contextmanager
def firmware_log_to(path: Path | str | None):
    """Within the block, firmware trials run in a child process append their printf output to `path`."""
    before = dict(_LOG)
    _LOG.update(path=None if path is None else str(path), pid=os.getpid())
    try:
        yield
    finally:
        _LOG.update(before)


def firmware_log_for(spec, path: Path | str):
    """`firmware_log_to(path)` when `spec` (or a strategy nested in it) is compiled firmware, else a
    context that does nothing (no empty log beside other strategies' runs). The log starts empty: it
    holds this run's output, as the trace beside it holds this run's rows."""
    if not _uses_firmware(spec):
        return contextlib.nullcontext()
    Path(path).write_text("")
    return firmware_log_to(path)


def _uses_firmware(spec) -> bool:
    if isinstance(spec.cls, type) and issubclass(spec.cls, FirmwareStrategy):
        return True
    for _, value in (spec.params if spec.params is not None else ()):
        for item in (value if isinstance(value, (list, tuple)) else (value,)):
            if hasattr(item, "cls") and hasattr(item, "params") and _uses_firmware(item):
                return True
    return False


class FirmwareParams(StrategyParams):
    sources: Annotated[list[str], Field(min_length=1, max_length=MAX_SOURCES)]
    """C source files, relative to the scenario file."""
    include: Annotated[list[str], Field(max_length=100)] = []
    """Extra include folders, relative to the scenario file (wheelbench.h is always on the path)."""
    defines: dict[str, int | float | bool | str] = {}
    """Preprocessor definitions, NAME: value (true/false become 1/0; a string goes in as written)."""
    cflags: Annotated[list[str], Field(max_length=100)] = []
    """Extra compiler flags (e.g. -O2)."""
    writes: Literal["volts", "duty"] | None = None
    """What the firmware writes, if it writes one form only: `duty` needs drive.pwm (else pwm_max is 0
    and the runner reads volts), `volts` refuses drive.pwm (with it the runner reads the duty); checked
    at load (`sim.model.scenario`). Absent: either, as pwm_max says."""
    _build: Build | None = PrivateAttr(default=None)

    @field_validator("sources", "include", mode="after")
    @classmethod
    def _absolute(cls, value: list[str], info) -> list[str]:
        base = Path((info.context or {}).get("base_dir", Path.cwd()))
        out = []
        for i, item in enumerate(value):
            path = Path(item) if Path(item).is_absolute() else base / item
            is_ok = path.is_file() if info.field_name == "sources" else path.is_dir()
            if not is_ok:
                what = "file" if info.field_name == "sources" else "folder"
                raise ValueError(f"@[{i}]: no such {what} {str(path)!r}")
            out.append(str(path.resolve()))
        return out

    @field_validator("defines", mode="after")
    @classmethod
    def _names(cls, value: dict) -> dict:
        for name, v in value.items():
            if not _C_NAME.fullmatch(name):
                raise ValueError(f"@{name}: a define's name must be a C identifier")
            if isinstance(v, float) and not math.isfinite(v):
                raise ValueError(f"@{name}: expected a finite number, found {v!r}")
            if isinstance(v, str) and ("\n" in v or "\0" in v):
                raise ValueError(f"@{name}: a define's value must be one line")
        return value

    @model_validator(mode="after")
    def _compile(self):
        self._build = build_firmware(sources=[Path(s) for s in self.sources], include=[Path(i) for i in self.include],
                                     defines=self.define_text(), cflags=list(self.cflags))
        return self

    def define_text(self) -> dict[str, str]:
        """The defines as the compiler gets them (NAME -> text)."""
        return {k: (str(int(v)) if isinstance(v, bool) else (repr(v) if isinstance(v, float) else str(v)))
                for k, v in self.defines.items()}

    @property
    def build(self) -> Build:
        return self._build


class FirmwareStrategy(Strategy):
    """The firmware's wb_step as the law: readings in (floats and raw counts), volts or duty out.

    The compiled wrapper (`sim.strategies.firmware.build`) fills wb_input_t: the tick's time, the readings, and
    the readings in whole encoder counts (the angle from 0 at upright, unwrapped across +-pi; the
    wheel from 0 at the first tick, adding each tick's speed reading times the period).

    On a 3D device (`sim.model.device3d.Device3D`: one to three wheels, a hinge or ball mount) the
    wrapper also fills the attitude (tilt_rad, rates_rad_s), every wheel's entries and, with an IMU,
    its raw words, and `decide` returns one voltage per wheel (with drive.pwm each wheel's duty as
    volts at the nominal supply, as on one wheel); `brake` is then False or a tuple of one flag per wheel.
    """

    kind = "firmware"
    goal = "balance"
    isolated: ClassVar[bool] = True   # trials run in the isolation child (see sim.strategies.plugins_in)
    Params = FirmwareParams

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        self._redirect_printf()
        module = load_fresh(self.params.build)
        ffi, lib = module.ffi, module.lib
        d = self.device
        # > 0 with drive.pwm: the firmware writes a duty (on a 3D device one per wheel, each wheel's bridge)
        self.pwm_max = d.pwm_max
        gyro_lsb, accel_lsb = d.imu_gyro_lsb_rad_s, d.imu_accel_lsb_m_s2
        period_s = 1.0 / d.control_rate_hz
        wheels = getattr(d, "n_wheels", None)   # a 3D device: the per-wheel form (None: the one-wheel device)
        cfg = ffi.new("wb_config_t *", {"period_us": round(period_s * 1e6), "supply_v": d.supply_v,
                                        "angle_counts_per_rev": d.angle_counts_per_rev,
                                        "wheel_counts_per_rev": d.wheel_counts_per_rev, "pwm_max": self.pwm_max,
                                        "gyro_rad_s_per_lsb": gyro_lsb, "accel_m_s2_per_lsb": accel_lsb,
                                        "n_wheels": wheels or 1,
                                        "mount": lib.WB_MOUNT_BALL if getattr(d, "mount", "hinge") == "ball"
                                        else lib.WB_MOUNT_HINGE})
        # a duty is a share of the bus as it is: the runner scales the volts it stands for (duty /
        # pwm_max * the nominal supply) by the bus over the nominal supply (a battery's sag)
        self.commands_duty = self.pwm_max > 0
        self._imu = lib.wbx_imu if gyro_lsb > 0 else None
        # the bus as the tick's reading gives it (wb_input_t.bus_v), passed on when it changes
        self._bus, self._bus_v = lib.wbx_bus, d.supply_v
        self._out = ffi.new("wb_output_t *")
        self._tick, self._module = lib.wbx_tick, module   # the module keeps the loaded copy alive
        self._form_seen = lib.wbx_form_seen
        self.loaded_from = module.__file__    # the build's file, or a temporary copy of it (build.load_fresh)
        self._phases = [f"fw {i}" for i in range(256)]
        lib.wbx_init(cfg, period_s, float(d.supply_v))
        self.phase = self._phases[0]
        if wheels is not None:
            self._set_up_wheels(ffi, lib, wheels)

    def _set_up_wheels(self, ffi, lib, n: int) -> None:
        """The per-wheel call (`wbx_tick_wheels`) and its buffers: the readings in, the volts out."""
        self._x, self._v, self._n = ffi.new("double[]", 5 + n), ffi.new("double[]", n), n
        self._pads = None       # (zeros after the angles, zeros after the rates): set at the first tick
        self._tick_wheels, self._unpack = lib.wbx_tick_wheels, ffi.unpack
        # the brakes' bit mask -> what `brake` says: False, or one flag per wheel
        self._brakes = [False] + [tuple(bool(m >> i & 1) for i in range(n)) for m in range(1, 1 << n)]
        self.decide = self._decide_wheels

    def _other_form(self, form: int) -> str:
        """What is wrong when the firmware wrote only the form of command the drive does not read."""
        if form == 1:
            return (f"the firmware wrote volts but no duty, and with drive.pwm (pwm_max {self.pwm_max}) the runner "
                    "reads its duty: write duty (wheels_duty), or remove drive.pwm")
        return ("the firmware wrote a duty but no volts, and without drive.pwm (pwm_max 0) the runner reads its "
                "volts: set drive.pwm.resolution_bits, or write volts (wheels_volts)")

    def _pass_bus(self, volts: float) -> None:
        """wb_input_t.bus_v from the reading's supply, V (a runner that sets none leaves the nominal)."""
        self._bus_v = volts
        self._bus(volts if math.isfinite(volts) else self.device.supply_v)

    def _redirect_printf(self) -> None:
        """In the isolation child only, send file descriptor 1 (C's stdout) to the log or nowhere, and
        turn Python's fault handler off; in the parent's own process (rendering) both are left alone."""
        if os.getpid() in (_LOG["pid"], _IMPORT_PID):
            return
        # a crash of the firmware is the trial's outcome, not a fault of Python to dump tracebacks for
        faulthandler.disable()
        target = _LOG["path"] or os.devnull
        fd = os.open(target, os.O_WRONLY | os.O_CREAT | os.O_APPEND, 0o644)
        os.dup2(fd, 1)
        os.close(fd)

    def decide(self, reading: Reading) -> float:
        out = self._out
        if reading.supply_v != self._bus_v:
            self._pass_bus(reading.supply_v)
        if self._imu is not None:
            self._imu(*reading.imu_gyro_rad_s, *reading.imu_accel_m_s2)
        volts = self._tick(reading.angle_rad, reading.rate_rad_s, reading.wheel_speed_rad_s, out)
        if volts == 0.0 and self._form_seen():
            raise StrategyError(self._other_form(self._form_seen()))
        self.phase = self._phases[out.phase]
        self.brake = out.brake != 0
        return volts

    def _decide_wheels(self, reading: Reading) -> list[float]:
        """A 3D device's tick: tilt (2), rates (3), then the wheels' speeds in one array; volts per wheel."""
        angles, rates = reading.angles_rad, reading.rates_rad_s
        pads = self._pads
        if pads is None:
            pads = self._pads = ((0.0,) * (2 - len(angles)), (0.0,) * (3 - len(rates)))
        self._x[0:5 + self._n] = angles + pads[0] + rates + pads[1] + reading.wheel_speeds_rad_s
        if reading.supply_v != self._bus_v:
            self._pass_bus(reading.supply_v)
        if self._imu is not None:
            self._imu(*reading.imu_gyro_rad_s, *reading.imu_accel_m_s2)
        brakes = self._tick_wheels(self._x, self._out, self._v)
        if brakes > 255:
            raise StrategyError(self._other_form(brakes >> 8))
        self.phase = self._phases[self._out.phase]
        self.brake = self._brakes[brakes]
        return self._unpack(self._v, self._n)
