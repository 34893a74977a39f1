"""Sensors: what the strategy sees of the true state, at the control rate.

Each reading is taken from the true state `delay` seconds earlier (rounded to whole physics
steps), then:
- angle: quantised by an encoder (floor to whole counts), plus a fixed bias and white noise,
  wrapped to (-pi, pi];
- body rate: a rate gyro (true rate + bias + noise), or, with no gyro, the backward difference
  of successive angle readings over one control period;
- wheel speed: from encoder counts over one control period when `counts_per_rev` is set,
  else the true relative speed; plus white noise.
Noise is Gaussian with the given standard deviation, drawn from the trial's seeded generator.

Encoders read over a bus (optional `latency`, `update_rate`, `max_speed` of the angle and wheel
sections): a channel's value is `latency` older still (whole steps), is refreshed only on
multiples of its update period (the controller sees the last refresh between them), and beyond
`max_speed` the sensor loses track: its position stays at the last tracked value (a speed from
counts reads zero; a direct speed reading stays at its last tracked value) until the speed is
back under the limit.
"""

from __future__ import annotations

import math

import numpy as np

from ..core.angles import wrap_angle
from ..core.unrolled import unrolled

NOISE_CHUNK = 4096  # control ticks of noise drawn and converted to Python floats at a time


class SensorSuite:
    """Turns true-state history into measured values. `read(k)` is called on control ticks only."""

    def __init__(self, sensors, *, step_s: float, n_ticks: int, rng: np.random.Generator):
        self.delay_steps = int(round(sensors.delay / step_s))
        self.period_s = 1.0 / sensors.rate
        a, g, w = sensors.angle, sensors.rate_gyro, sensors.wheel
        self.angle_res = 2 * math.pi / a.counts_per_rev if a.counts_per_rev else 0.0
        self.angle_bias, self.angle_noise = a.bias, a.noise
        self.has_gyro = g is not None
        self.gyro_bias = g.bias if g else 0.0
        self.gyro_noise = g.noise if g else 0.0
        self.wheel_res = 2 * math.pi / w.counts_per_rev if w.counts_per_rev else 0.0
        self.wheel_noise = w.noise
        self.limited = any(getattr(c, key, None) for c in (a, w) for key in ("max_speed", "update_rate", "latency"))
        if self.limited:
            self._limits = [_ChannelLimits(c, step_s) for c in (a, w)]
            self._held = [None, None]   # last tracked (angle), (wheel angle, wheel speed)
        # The trial's noise is the first n_ticks x 3 standard normals of the trial's generator, as if
        # drawn up front, but read a chunk at a time from a private copy of the stream (a 5,000 s
        # trial would otherwise hold 60 MB of it); the trial's generator is moved past the same
        # draws, a chunk at a time, so whatever draws from it next sees the same numbers.
        self.n_ticks = max(n_ticks, 1)
        self._noise_rng = np.random.Generator(type(rng.bit_generator)())
        self._noise_rng.bit_generator.state = rng.bit_generator.state
        for start in range(0, self.n_ticks, NOISE_CHUNK):
            rng.standard_normal((min(NOISE_CHUNK, self.n_ticks - start), 3))
        self._last_row: list = []
        self.tick = 0
        self.prev_angle: float | None = None
        self.prev_wheel_counts = 0.0
        self._chunk: list = []       # the next rows of `noise` as Python floats (cheaper per tick)
        self._chunk_end = 0

    def _noise_row(self) -> list:
        """This tick's three standard-normal draws (the last row again if the trial outruns them)."""
        i = self.tick
        if i >= self._chunk_end:
            if i >= self.n_ticks:
                return self._last_row
            self._chunk = self._noise_rng.standard_normal((min(NOISE_CHUNK, self.n_ticks - i), 3)).tolist()
            self._chunk_end = i + len(self._chunk)
            self._last_row = self._chunk[-1]
        return self._chunk[i - self._chunk_end + len(self._chunk)]

    def read(self, k: int, angle: np.ndarray, rate: np.ndarray, wheel_angle: np.ndarray,
             wheel_speed: np.ndarray) -> tuple[float, float, float]:
        """(angle rad, body rate rad/s, wheel speed rad/s) as measured at physics step k.

        The arrays are the true-state history (the trace's columns), filled up to index k.
        """
        j = k - self.delay_steps
        if j < 0:
            j = 0
        ja = jw = j
        limited = self.limited
        if limited:
            ja, jw = self._limits[0].row(j), self._limits[1].row(j)
        n = self._noise_row()
        self.tick += 1
        theta = float(angle[ja])
        if limited and self._limits[0].max_speed:
            theta = self._tracked(0, abs(rate[ja]), theta)
        if self.angle_res:
            theta = math.floor(theta / self.angle_res) * self.angle_res
        theta_m = wrap_angle(theta + self.angle_bias + self.angle_noise * n[0])
        if self.has_gyro:
            rate_m = float(rate[j]) + self.gyro_bias + self.gyro_noise * n[1]
        elif self.prev_angle is None:
            rate_m = 0.0
        else:
            rate_m = wrap_angle(theta_m - self.prev_angle) / self.period_s
        self.prev_angle = theta_m
        if limited:
            wheel_pos, wheel_m = float(wheel_angle[jw]), float(wheel_speed[jw])
            if self._limits[1].max_speed:
                wheel_pos, wheel_m = self._tracked(1, abs(wheel_m), (wheel_pos, wheel_m))
        elif not self.wheel_res:
            wheel_m = float(wheel_speed[j])
        if self.wheel_res:
            counts = math.floor((wheel_pos if limited else float(wheel_angle[j])) / self.wheel_res)
            if self.tick == 1:
                self.prev_wheel_counts = math.floor(wheel_angle[jw] / self.wheel_res - wheel_speed[jw] * self.period_s / self.wheel_res)
            wheel_m = (counts - self.prev_wheel_counts) * self.wheel_res / self.period_s
            self.prev_wheel_counts = counts
        return theta_m, rate_m, wheel_m + self.wheel_noise * n[2]

    def _tracked(self, channel: int, speed: float, value):
        """`value` while the channel's speed is within its max_speed, else the last tracked value."""
        if speed > self._limits[channel].max_speed and self._held[channel] is not None:
            return self._held[channel]
        self._held[channel] = value
        return value


class _ChannelLimits:
    """A bus-read encoder channel's extra age, refresh period (steps) and tracking limit (rad/s)."""

    def __init__(self, section, step_s: float):
        self.latency_steps = int(round(getattr(section, "latency", 0.0) / step_s))
        rate = getattr(section, "update_rate", None)
        self.every = int(round(1.0 / (rate * step_s))) if rate else 1
        self.max_speed = getattr(section, "max_speed", None)

    def row(self, j: int) -> int:
        """The history row a read at row j sees (j already carries the suite's delay)."""
        j = max(j - self.latency_steps, 0)
        return (j // self.every) * self.every


def axes_reader(suites: list[SensorSuite], columns: list[tuple], *, used=None, record=None):
    """One call per control tick for several suites built from the same sensors (the 3D runner's
    one suite per axis): `read(k) -> (angles, rates, wheel speeds)`, tuples of the numbers each
    suite's `read(k, *columns[i])` gives (suite i's angle, rate and wheel speed at position i), from
    the same noise streams.

    `columns[i]`: suite i's (angle, rate, wheel angle, wheel speed) histories, memoryviews of floats.
    `used`: (angles, rates, wheels), how many leading suites' angles, rates and wheel speeds the
    caller reads (default: every suite's); only those are returned, and the others are not worked
    out (each suite's noise is its own stream, so the rest are the same numbers). An angle feeding
    a rate (no gyro) is always worked out. `record`: columns (item assignment by row) that `read(k)`
    writes the returned numbers into at row k, in the order returned (angles, rates, wheel speeds).
    With an encoder bus (latency, update rate or tracking
    limit) each suite reads on its own; otherwise the reads are done here in one pass (the
    per-suite calls and attribute lookups cost as much as the sums).
    """
    n_axes = len(suites)
    n_angles, n_rates, n_wheels = used if used is not None else (n_axes,) * 3
    if any(s.limited for s in suites):
        reads = [(s.read, *c) for s, c in zip(suites, columns)]

        def read_each(k: int) -> tuple:
            rows = [r(k, a, w, wa, ws) for r, a, w, wa, ws in reads]
            out = (tuple(r[0] for r in rows[:n_angles]), tuple(r[1] for r in rows[:n_rates]),
                   tuple(r[2] for r in rows[:n_wheels]))
            for c, x in zip(record or (), out[0] + out[1] + out[2]):
                c[k] = x
            return out
        return read_each
    return _written_out_read(suites, columns, (n_angles, n_rates, n_wheels), record)


def _written_out_read(suites: list[SensorSuite], columns: list[tuple], used: tuple[int, int, int], record):
    """`axes_reader`'s one-pass read for suites without an encoder bus, written out per axis from the
    templates below (`sim.core.unrolled`): `SensorSuite.read`'s rules, the same doubles."""
    n_axes, (n_angles, n_rates, n_wheels) = len(suites), used
    s0 = suites[0]
    has_gyro = s0.has_gyro
    names = {"delay": s0.delay_steps, "period": s0.period_s, "angle_res": s0.angle_res, "angle_noise": s0.angle_noise,
             "gyro_bias": s0.gyro_bias, "gyro_noise": s0.gyro_noise, "wheel_res": s0.wheel_res,
             "wheel_noise": s0.wheel_noise, "floor": math.floor, "fmod": math.fmod, "pi": math.pi,
             "two_pi": 2 * math.pi, "wrap_angle": wrap_angle, "prev_angle": [None] * n_axes,
             "prev_counts": [0.0] * n_axes}
    noise = [[], 0, 0, 0]     # the suites' current chunks of noise rows, the chunk's first and end tick, the tick

    def refill(i: int) -> list:
        """This tick's noise row of every suite at a chunk's end (each suite's own stream, as its `read` draws it)."""
        out = []
        for s in suites:
            s.tick = i
            out.append(s._noise_row())
            s.tick = i + 1
        s = suites[0]
        noise[0] = [t._chunk for t in suites]
        noise[1], noise[2] = s._chunk_end - len(s._chunk), s._chunk_end
        return out

    names.update(noise=noise, refill=refill)
    code, out = [], {"theta": [], "rate": [], "wheel": []}     # the lines; the returned values, per kind
    for i, (s, (angle, rate, wheel_angle, wheel_speed)) in enumerate(zip(suites, columns)):
        names.update({f"bias{i}": s.angle_bias, f"angle_col{i}": angle, f"rate_col{i}": rate,
                      f"wheel_angle_col{i}": wheel_angle, f"wheel_speed_col{i}": wheel_speed})
        with_rate, with_wheel, axis = i < n_rates, i < n_wheels, []
        if i < n_angles or (not has_gyro and with_rate):    # an angle feeding a rate (no gyro) is worked out too
            axis.append(_ANGLE_READ if s0.angle_res else _ANGLE_READ.replace(_ANGLE_COUNTS, ""))
            if not has_gyro:
                axis.append(_RATE_FROM_ANGLES if with_rate else "    prev_angle[{i}] = theta{i}\n")
        if has_gyro and with_rate:
            axis.append(_RATE_READ)
        if with_wheel:
            axis.append(_WHEEL_FROM_COUNTS if s0.wheel_res else _WHEEL_READ)
        code += [c.format(i=i) for c in axis]
        for kind, used_here in zip(out, (i < n_angles, with_rate, with_wheel)):
            if used_here:
                out[kind].append(f"{kind}{i}")
    returned = [v for values in out.values() for v in values]
    if record is not None:
        if len(record) != len(returned):
            raise ValueError(f"record: {len(record)} columns for {len(returned)} numbers read")
        names.update({f"record{i}": c for i, c in enumerate(record)})
        code += [f"    record{i}[k] = {v}\n" for i, v in enumerate(returned)]
    source = _AXES_READ.format(unpack=", ".join(f"n{i}" for i in range(n_axes)) + ("," if n_axes == 1 else ""),
                               rows="".join(f"        n{i} = chunks[{i}][r]\n" for i in range(n_axes)), body="".join(code),
                               out=", ".join("(" + "".join(f"{v}, " for v in values) + ")" for values in out.values()))
    return unrolled(source, names, f"sensors of {n_axes} axes")["read"]


# `axes_reader`'s code, written out per axis (`sim.core.unrolled`): `SensorSuite.read`'s rules with its
# constants bound, the noise row n{i} of axis i's stream, j the row read (the delay applied), the
# histories of axis i as *_col{i}
_AXES_READ = """
def read(k):
    j = k - delay
    if j < 0:
        j = 0
    chunks, first, end, tick = noise
    noise[3] = tick + 1
    if tick < end:
        r = tick - first
{rows}    else:
        {unpack} = refill(tick)
{body}    return {out}
"""
_ANGLE_COUNTS = """    theta = floor(theta / angle_res) * angle_res
"""
_ANGLE_READ = """    theta = angle_col{i}[j]
""" + _ANGLE_COUNTS + """    a = fmod(theta + bias{i} + angle_noise * n{i}[0] + pi, two_pi)   # wrap_angle, inline
    if a <= 0.0:
        a += two_pi
    theta{i} = a - pi
"""
_RATE_READ = """    rate{i} = rate_col{i}[j] + gyro_bias + gyro_noise * n{i}[1]
"""
_RATE_FROM_ANGLES = """    rate{i} = 0.0 if prev_angle[{i}] is None else wrap_angle(theta{i} - prev_angle[{i}]) / period
    prev_angle[{i}] = theta{i}
"""
_WHEEL_READ = """    wheel{i} = wheel_speed_col{i}[j] + wheel_noise * n{i}[2]
"""
_WHEEL_FROM_COUNTS = """    counts = floor(wheel_angle_col{i}[j] / wheel_res)
    if tick == 0:
        prev_counts[{i}] = floor(wheel_angle_col{i}[j] / wheel_res - wheel_speed_col{i}[j] * period / wheel_res)
    wheel{i} = (counts - prev_counts[{i}]) * wheel_res / period + wheel_noise * n{i}[2]
    prev_counts[{i}] = counts
"""
