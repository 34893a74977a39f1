"""Compiling firmware sources against `wheelbench.h` with cffi (out-of-line API mode), cached.

A build is keyed by a SHA-256 over what is known before compiling: `wheelbench.h`, the sources'
names and contents, the include folders, the defines, the flags, the compiler command and the
Python ABI. The headers the sources include are known only once compiled: the compiler lists
them (-MMD), and each build stores them with their SHA-256 (`deps.json`) beside the module. A
build is reused when its key matches and every header it read is unchanged, so editing a header,
even one found beside a source rather than in an include folder, compiles again.

The cache folder is `$WHEELBENCH_FIRMWARE_CACHE` when set, else `$XDG_CACHE_HOME/wheelbench/firmware`,
else `~/.cache/wheelbench/firmware`: one subfolder per key, one subfolder in it per set of header
contents, each made whole by a rename (two processes making the same build at once both succeed;
one copy stays). Nothing is removed from it; delete the folder to reclaim the space.

A cache miss first compiles and links the sources alone with the system compiler (the header
force-included, so the firmware's definitions are type-checked against the contract), which gives
the user the compiler's own first error lines; then cffi builds the extension module with its
output sent to a log, not the terminal. Failures raise `FirmwareBuildError` (a ValueError: bad
input, reported as one line by the scenario loader).
"""

from __future__ import annotations

import contextlib
import hashlib
import importlib.machinery
import importlib.util
import json
import os
import re
import shlex
import shutil
import subprocess
import sys
import sysconfig
import tempfile
from dataclasses import dataclass
from pathlib import Path

HEADER = Path(__file__).with_name("wheelbench.h")
CACHE_ENV = "WHEELBENCH_FIRMWARE_CACHE"
BUILD_RECIPE = "9"   # bump when the generated wrapper below changes: old builds are then not reused
ERROR_LINES = 2

# The wrapper cffi compiles around the firmware: one call per tick with the readings (cheaper
# from Python than filling the struct field by field). It keeps the tick's time and turns the
# readings into cumulative counts (the angle from 0 at upright, unwrapped across +-pi; each wheel
# from 0, adding each tick's speed times the period), zeroes the output, calls wb_step, flushes
# stdout (a trial that crashes keeps the printf output of every tick before), and returns volts
# (from the duty when pwm_max > 0: duty / pwm_max times the nominal supply in double precision, so
# that the drive's duty, those volts over the same supply, is the firmware's duty to a rounding).
# One-wheel devices call wbx_tick (three readings, one volt back); 3D devices call wbx_tick_wheels
# (the attitude readings and every wheel's speed in one array, each wheel's volts out, the brakes as
# a bit mask). Entry 0 of the arrays mirrors the
# one-wheel fields; wheel 1's command is the array's entry when the firmware set it (non-zero),
# else the one-wheel field, and its brake is either one's.
_WRAPPER = """
#include <math.h>
#include <stdio.h>
#include <string.h>
#include "wheelbench.h"
static wb_input_t wbx_in;
static wb_config_t wbx_cfg;
static double wbx_period_s, wbx_supply_v, wbx_angle_res, wbx_wheel_res;
static uint64_t wbx_tick_n;
static int32_t wbx_angle_prev;
static int wbx_form;
/* 1: the firmware wrote volts only where the drive reads its duty (pwm_max > 0: every duty 0, a volt
   of 1.5 counts or more); 2: a duty only where it reads volts (pwm_max == 0: every volt 0, a duty
   not 0); else 0. Over the one-wheel fields and the first n wheels' entries. */
static int wbx_other_form(const wb_output_t *out, int n) {
    int i, duty = out->duty != 0, volts = 0;
    double count = wbx_cfg.pwm_max > 0 ? 1.5 * wbx_supply_v / wbx_cfg.pwm_max : 0.0;
    for (i = 0; i < n; i++)
        duty |= out->wheels_duty[i] != 0;
    if (wbx_cfg.pwm_max > 0) {
        if (duty)
            return 0;
        volts = fabs(out->volts) >= count;
        for (i = 0; i < n; i++)
            volts |= fabs(out->wheels_volts[i]) >= count;
        return volts ? 1 : 0;
    }
    volts = out->volts != 0.0f;
    for (i = 0; i < n; i++)
        volts |= out->wheels_volts[i] != 0.0f;
    return (duty && !volts) ? 2 : 0;
}
static int wbx_form_seen(void) { return wbx_form; }
static void wbx_init(wb_config_t *cfg, double period_s, double supply_v) {
    int i;
    memset(&wbx_in, 0, sizeof wbx_in);
    if (cfg->n_wheels < 1 || cfg->n_wheels > WB_MAX_WHEELS)
        cfg->n_wheels = 1;
    for (i = 0; i < cfg->n_wheels; i++)
        cfg->wheels_counts_per_rev[i] = cfg->wheel_counts_per_rev;
    wbx_cfg = *cfg;
    wbx_period_s = period_s;
    wbx_supply_v = supply_v;
    wbx_angle_res = cfg->angle_counts_per_rev ? 6.283185307179586 / cfg->angle_counts_per_rev : 0.0;
    wbx_wheel_res = cfg->wheel_counts_per_rev ? 6.283185307179586 / cfg->wheel_counts_per_rev : 0.0;
    wbx_tick_n = 0;
    wbx_in.bus_v = (float)supply_v;
    wb_init(cfg);
    fflush(stdout);
}
static int16_t wbx_raw(double value, double lsb) {
    double c;
    if (!(lsb > 0.0))
        return 0;
    c = nearbyint(value / lsb);
    return (int16_t)(c > 32767.0 ? 32767.0 : (c < -32768.0 ? -32768.0 : c));
}
static int wbx_form_seen(void);
void wbx_bus(double bus_v) { wbx_in.bus_v = (float)bus_v; }
void wbx_imu(double gx, double gy, double gz, double ax, double ay, double az) {
    double g[3] = {gx, gy, gz}, a[3] = {ax, ay, az};
    int i;
    for (i = 0; i < 3; i++) {
        wbx_in.gyro_raw[i] = wbx_raw(g[i], wbx_cfg.gyro_rad_s_per_lsb);
        wbx_in.accel_raw[i] = wbx_raw(a[i], wbx_cfg.accel_m_s2_per_lsb);
    }
}
static void wbx_angle_counts(double angle_rad) {
    if (wbx_angle_res > 0.0) {
        int32_t c = (int32_t)lround(angle_rad / wbx_angle_res);
        if (wbx_tick_n == 0) {
            wbx_in.angle_counts = c;
        } else {
            int32_t cpr = wbx_cfg.angle_counts_per_rev, half = cpr / 2;
            int32_t dc = ((c - wbx_angle_prev + half) % cpr + cpr) % cpr - half;
            wbx_in.angle_counts += dc;
        }
        wbx_angle_prev = c;
    }
}
static double wbx_tick(double angle_rad, double rate_rad_s, double wheel_speed_rad_s, wb_output_t *out) {
    wbx_in.t_us = (uint32_t)(uint64_t)llround((double)wbx_tick_n * wbx_period_s * 1e6);
    wbx_in.angle_rad = (float)angle_rad;
    wbx_in.rate_rad_s = (float)rate_rad_s;
    wbx_in.wheel_speed_rad_s = (float)wheel_speed_rad_s;
    wbx_in.tilt_rad[0] = wbx_in.angle_rad;
    wbx_in.rates_rad_s[0] = wbx_in.rate_rad_s;
    wbx_angle_counts(angle_rad);
    if (wbx_wheel_res > 0.0)
        wbx_in.wheel_counts += (int32_t)lround(wheel_speed_rad_s * wbx_period_s / wbx_wheel_res);
    wbx_in.wheels_speed_rad_s[0] = wbx_in.wheel_speed_rad_s;
    wbx_in.wheels_counts[0] = wbx_in.wheel_counts;
    wbx_tick_n++;
    memset(out, 0, sizeof *out);
    wb_step(&wbx_in, out);
    fflush(stdout);
    if (out->wheels_brake[0])
        out->brake = 1;
    wbx_form = wbx_other_form(out, 1);
    if (wbx_cfg.pwm_max > 0) {
        int32_t duty = out->wheels_duty[0] != 0 ? out->wheels_duty[0] : out->duty;
        return (double)duty / wbx_cfg.pwm_max * wbx_supply_v;
    }
    return out->wheels_volts[0] != 0.0f ? (double)out->wheels_volts[0] : (double)out->volts;
}
/* x: tilt about x, tilt about y, rates about x, y, z, then each wheel's speed (a hinge: zeros where
   the device has no such axis). volts: each wheel's command out. Returns the brakes, bit i = wheel i + 1,
   and wbx_other_form's answer times 256. */
static int wbx_tick_wheels(const double *x, wb_output_t *out, double *volts) {
    int i, n = wbx_cfg.n_wheels, brakes = 0;
    wbx_in.t_us = (uint32_t)(uint64_t)llround((double)wbx_tick_n * wbx_period_s * 1e6);
    for (i = 0; i < 2; i++)
        wbx_in.tilt_rad[i] = (float)x[i];
    for (i = 0; i < 3; i++)
        wbx_in.rates_rad_s[i] = (float)x[2 + i];
    wbx_in.angle_rad = wbx_in.tilt_rad[0];
    wbx_in.rate_rad_s = wbx_in.rates_rad_s[0];
    wbx_angle_counts(x[0]);
    for (i = 0; i < n; i++) {
        double speed = x[5 + i];
        int32_t c = wbx_wheel_res > 0.0 ? (int32_t)lround(speed * wbx_period_s / wbx_wheel_res) : 0;
        wbx_in.wheels_speed_rad_s[i] = (float)speed;
        wbx_in.wheels_counts[i] += c;
    }
    wbx_in.wheel_speed_rad_s = wbx_in.wheels_speed_rad_s[0];
    wbx_in.wheel_counts = wbx_in.wheels_counts[0];
    wbx_tick_n++;
    memset(out, 0, sizeof *out);
    wb_step(&wbx_in, out);
    fflush(stdout);
    for (i = 0; i < n; i++) {
        int use_one = i == 0;   /* wheel 1: the one-wheel field when its array entry was left at 0 */
        if (wbx_cfg.pwm_max > 0) {
            int32_t duty = (use_one && out->wheels_duty[0] == 0) ? out->duty : out->wheels_duty[i];
            volts[i] = (double)duty / wbx_cfg.pwm_max * wbx_supply_v;
        } else {
            volts[i] = (use_one && out->wheels_volts[0] == 0.0f) ? (double)out->volts : (double)out->wheels_volts[i];
        }
        if (out->wheels_brake[i] || (use_one && out->brake))
            brakes |= 1 << i;
    }
    return brakes | wbx_other_form(out, n) << 8;
}
"""
_WRAPPER_CDEF = """
void wbx_init(wb_config_t *cfg, double period_s, double supply_v);
double wbx_tick(double angle_rad, double rate_rad_s, double wheel_speed_rad_s, wb_output_t *out);
int wbx_form_seen(void);
void wbx_imu(double gx, double gy, double gz, double ax, double ay, double az);
void wbx_bus(double bus_v);
int wbx_tick_wheels(const double *x, wb_output_t *out, double *volts);
"""

_STUB_MAIN = """
#include "wheelbench.h"
int main(void) { wb_config_t c = {0}; wb_input_t i = {0}; wb_output_t o = {0};
                 wb_init(&c); wb_step(&i, &o); return 0; }
"""


class FirmwareBuildError(ValueError):
    """The firmware did not compile or link: bad input, the compiler's first error lines."""


@dataclass(frozen=True)
class Build:
    """A compiled firmware: the extension module's path and name, and whether this call compiled it."""

    path: Path
    module_name: str
    key: str
    compiled_now: bool


def cache_dir() -> Path:
    """The firmware build cache folder (see the module docstring)."""
    if os.environ.get(CACHE_ENV):
        return Path(os.environ[CACHE_ENV])
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "wheelbench" / "firmware"


def contract_cdef() -> str:
    """The declarations of `wheelbench.h` between its WB_CDEF markers (what cffi type-checks)."""
    lines = HEADER.read_text().splitlines()
    begin = next(i for i, ln in enumerate(lines) if ln.startswith("/* WB_CDEF_BEGIN"))
    end = lines.index("/* WB_CDEF_END */")
    return "\n".join(lines[begin + 1:end])


def compiler() -> list[str]:
    """The C compiler command: $CC, else the one Python was built with, else `cc`."""
    return shlex.split(os.environ.get("CC") or sysconfig.get_config_var("CC") or "cc")


def build_firmware(*, sources: list[Path], include: list[Path], defines: dict[str, str],
                   cflags: list[str]) -> Build:
    """The cached build of these sources, compiling it on a miss. Paths are absolute."""
    key = _key(sources, include, defines, cflags)
    name = f"_wbfw_{key[:24]}"
    root = cache_dir()
    builds = root / key[:24]
    found = _matching_build(builds, name)
    if found is not None:
        return Build(path=found, module_name=name, key=key, compiled_now=False)
    try:
        builds.mkdir(parents=True, exist_ok=True)
        work = Path(tempfile.mkdtemp(prefix=".build-", dir=root))
    except OSError as exc:
        raise FirmwareBuildError(f"@sources: cannot use the firmware cache folder {str(root)!r} ({exc.strerror}); "
                                 f"set {CACHE_ENV} to a writable folder") from None
    try:
        # Two folders of their own: setuptools puts each object at its tmpdir plus the source's
        # absolute path, so a file of the check step beside it (e.g. `check`) could collide with
        # the first folder of that path.
        (work / "cc").mkdir()
        (work / "cffi").mkdir()
        args = _compile_args(include, defines, cflags)
        deps = {str(p): _sha256(p) for p in sorted(_check_compiles(sources, args, work / "cc"))}
        built = _cffi_build(name, sources, include, defines, cflags, work / "cffi")
        final = builds / hashlib.sha256(json.dumps(deps, sort_keys=True).encode()).hexdigest()[:16]
        staging = Path(tempfile.mkdtemp(prefix=".stage-", dir=builds))
        shutil.copy2(built, staging / built.name)
        (staging / "deps.json").write_text(json.dumps(deps, indent=1, sort_keys=True) + "\n")
        (staging / "build.txt").write_text(_recipe_text(sources, include, defines, cflags))
        try:
            os.rename(staging, final)
        except OSError:                 # another process made the same build first: keep theirs
            shutil.rmtree(staging, ignore_errors=True)
    finally:
        shutil.rmtree(work, ignore_errors=True)
    return Build(path=final / (name + _ext_suffix()), module_name=name, key=key, compiled_now=True)


def _matching_build(builds: Path, name: str) -> Path | None:
    """The module of a finished build under `builds` whose headers all still hash as they did."""
    if not builds.is_dir():
        return None
    for manifest in sorted(builds.glob("*/deps.json")):
        module = manifest.parent / (name + _ext_suffix())
        try:
            deps = json.loads(manifest.read_text())
        except (OSError, ValueError):
            continue
        if module.is_file() and all(_sha256(Path(p)) == digest for p, digest in deps.items()):
            return module
    return None


def _sha256(path: Path) -> str | None:
    try:
        return hashlib.sha256(path.read_bytes()).hexdigest()
    except OSError:                     # gone: the build that read it does not match any more
        return None


_LOADED: set[str] = set()
"""Build files this process has loaded itself, or inherited loaded from the process it was forked from."""


def load_fresh(build: Build):
    """A fresh copy of the built module (its static variables at their initial values).

    The first load of a build in a process is the build's file itself: nothing of it is mapped yet,
    so its statics are fresh. That is every isolated trial: the isolation child is forked from a
    process that runs firmware only in children, and it runs one trial. A later load in the same
    process (in-process trials: `isolate=False`, clips) would get the same copy back, so the file is
    copied to a temporary name and loaded from there, then the temporary file is removed (the
    mapping stays)."""
    if str(build.path) not in _LOADED:
        _LOADED.add(str(build.path))
        return _load_extension(build.module_name, str(build.path))
    fd, tmp = tempfile.mkstemp(prefix=build.module_name + "-", suffix=_ext_suffix())
    os.close(fd)
    try:
        shutil.copyfile(build.path, tmp)
        return _load_extension(build.module_name, tmp)
    finally:
        os.unlink(tmp)


def _load_extension(name: str, path: str):
    loader = importlib.machinery.ExtensionFileLoader(name, path)
    spec = importlib.util.spec_from_file_location(name, path, loader=loader)
    module = importlib.util.module_from_spec(spec)
    loader.exec_module(module)
    return module


# ----------------------------------------------------------------------------- internals

def _ext_suffix() -> str:
    return sysconfig.get_config_var("EXT_SUFFIX") or ".so"


def _key(sources, include, defines, cflags) -> str:
    import cffi

    h = hashlib.sha256()

    def put(label: str, data: bytes) -> None:
        h.update(label.encode() + b"\0" + len(data).to_bytes(8, "little") + data)

    put("recipe", BUILD_RECIPE.encode())
    put("header", HEADER.read_bytes())
    put("abi", f"{sys.implementation.cache_tag} {_ext_suffix()} cffi {cffi.__version__}".encode())
    put("cc", " ".join(compiler()).encode())
    for src in sources:
        put("source " + src.name, _read(src, "sources"))
    for folder in include:
        put("include", str(folder).encode())
    for name in sorted(defines):
        put("define " + name, defines[name].encode())
    for flag in cflags:
        put("cflag", flag.encode())
    return h.hexdigest()


def _read(path: Path, key: str) -> bytes:
    try:
        return path.read_bytes()
    except OSError as exc:
        raise FirmwareBuildError(f"@{key}: cannot read {str(path)!r} ({exc.strerror})") from None


def _compile_args(include, defines, cflags) -> list[str]:
    args = ["-include", "wheelbench.h", "-I", str(HEADER.parent)]
    for folder in include:
        args += ["-I", str(folder)]
    args += [f"-D{name}={value}" for name, value in defines.items()]
    return args + list(cflags)


def _check_compiles(sources, args, work: Path) -> set[Path]:
    """Compile each source and link them with a stub main: the compiler's own messages on failure.
    Returns the files the compiler read (the sources and their non-system headers)."""
    cc = compiler()
    objects, read = [], set()
    for i, src in enumerate(sources):
        obj, deps = work / f"check{i}.o", work / f"check{i}.d"
        _run(cc + ["-c", str(src), "-o", str(obj), "-MMD", "-MF", str(deps)] + args, "sources",
             f"compiling {src.name} failed", cwd=work)
        objects.append(str(obj))
        read |= _make_deps(deps.read_text(), cwd=work)
    stub = work / "wb_stub_main.c"
    stub.write_text(_STUB_MAIN)
    _run(cc + [str(stub), *objects, "-o", str(work / "check"), "-I", str(HEADER.parent), "-lm"]
         + [f for f in args if f.startswith("-l") or f.startswith("-L")],
         "sources", "linking failed", cwd=work)
    return read


def _make_deps(text: str, *, cwd: Path) -> set[Path]:
    """The prerequisites of a make rule written by the compiler (-MMD): "target: a.c b.h \\ c.h"."""
    body = text.replace("\\\n", " ").split(": ", 1)[-1] if ": " in text else ""
    names = re.split(r"(?<!\\)\s+", body.strip())
    return {(cwd / n.replace("\\ ", " ")).resolve() for n in names if n}


def _run(cmd: list[str], key: str, what: str, *, cwd: Path) -> None:
    try:
        done = subprocess.run(cmd, capture_output=True, text=True, timeout=300, cwd=cwd)
    except FileNotFoundError:
        raise FirmwareBuildError(f"@{key}: no C compiler found ({cmd[0]!r}); install one (e.g. gcc) "
                                 "or set CC") from None
    except subprocess.TimeoutExpired:
        raise FirmwareBuildError(f"@{key}: {what}: the compiler took over 300 s") from None
    if done.returncode != 0:
        raise FirmwareBuildError(f"@{key}: {what}: {first_errors(done.stderr + done.stdout)}")


def first_errors(text: str) -> str:
    """The compiler's first error lines, joined into one line (all of its first lines if none says error)."""
    lines = [ln.strip() for ln in text.splitlines() if ln.strip()]
    errors = [ln for ln in lines if re.search(r"\berror\b|undefined reference", ln, re.IGNORECASE)]
    return " | ".join((errors or lines)[:ERROR_LINES]) or "(no message)"


def _cffi_build(name, sources, include, defines, cflags, work: Path) -> Path:
    import cffi

    ffi = cffi.FFI()
    ffi.cdef(contract_cdef() + "\n" + _WRAPPER_CDEF)
    ffi.set_source(name, _WRAPPER, sources=[str(s) for s in sources],
                   include_dirs=[str(HEADER.parent), *map(str, include)],
                   define_macros=list(defines.items()),
                   extra_compile_args=["-include", "wheelbench.h", *cflags], libraries=["m"])
    log = work.parent / "cffi.log"   # beside the tmpdir, where no object can land
    try:
        with _output_to(log):
            built = ffi.compile(tmpdir=str(work), verbose=False)
    except Exception as exc:
        text = log.read_text(errors="replace") if log.exists() else ""
        reason = first_errors(text) if text else exc
        raise FirmwareBuildError(f"@sources: building the module failed: {reason}") from None
    return Path(built)


@contextlib.contextmanager
def _output_to(path: Path):
    """File descriptors 1 and 2 to `path` for the duration (the compiler's children write there)."""
    for stream in (sys.stdout, sys.stderr):
        with contextlib.suppress(Exception):
            stream.flush()
    saved = [os.dup(1), os.dup(2)]
    with open(path, "wb") as sink:
        os.dup2(sink.fileno(), 1)
        os.dup2(sink.fileno(), 2)
        try:
            yield
        finally:
            os.dup2(saved[0], 1)
            os.dup2(saved[1], 2)
            for fd in saved:
                os.close(fd)


def _recipe_text(sources, include, defines, cflags) -> str:
    return "\n".join([f"source {s}" for s in sources] + [f"include {i}" for i in include]
                     + [f"define {k}={v}" for k, v in defines.items()] + [f"cflag {f}" for f in cflags]) + "\n"
