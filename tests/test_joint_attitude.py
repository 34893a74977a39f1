"""`sim.physics.joint_attitude` and `sim.run.attitude_rows`: the attitude columns a 3D trial works out
after its loop are the very doubles the step-by-step path gives.

No outside reference applies: this pins a speed path (rows kept raw during the loop, worked out at
once afterwards) to the plain path it stands in for, bit for bit. The plain path's physics is checked
against its references in tests/test_trial3d.py (angular momentum, precession) and its numbers are
pinned in tests/test_pins3d.py.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from sim.core.frames import quat_to_matrix, rotation_about_x_y
from sim.physics.joint_attitude import AttitudeMap

ROOT = Path(__file__).resolve().parent.parent


def _maps():
    """A few bodies: principal axes turned every way, upright attitudes level or not."""
    rng = np.random.default_rng(11)
    out = [AttitudeMap(((1.0, 0.0, 0.0), (0.0, 1.0, 0.0), (0.0, 0.0, 1.0)), rotation_about_x_y(0.0, 0.0))]
    for _ in range(3):
        q = rng.standard_normal(4)
        p = quat_to_matrix(tuple(q / np.linalg.norm(q)))
        out.append(AttitudeMap(p, rotation_about_x_y(*rng.uniform(-0.6, 0.6, 2))))
    return out


def _states(n: int = 4000):
    """Raw joint states: random unit quaternions and rates, plus the edges (upright exactly, upside
    down, unnormalised, a huge rate, inf and NaN)."""
    rng = np.random.default_rng(5)
    q = rng.standard_normal((n, 4))
    q /= np.linalg.norm(q, axis=1)[:, None]
    u = rng.standard_normal((n, 3)) * rng.choice([1e-3, 1.0, 50.0, 1e5], size=(n, 1))
    edges_q = [(0.0, 0.0, 0.0, 1.0), (0.0, 0.0, 0.0, -1.0), (1.0, 0.0, 0.0, 0.0), (0.0, 1.0, 0.0, 0.0),
               (0.0, 0.0, 1.0, 0.0), (0.3, 0.4, 0.0, 0.9), (math.nan, 0.0, 0.0, 1.0), (math.inf, 0.0, 0.0, 1.0),
               (0.0, 0.0, 0.0, 0.0), (-0.0, -0.0, -0.0, 1.0)]
    edges_u = [(0.0, 0.0, 0.0), (-0.0, 0.0, -0.0), (1e300, 0.0, 0.0), (math.nan, 1.0, 1.0), (math.inf, 0.0, 0.0),
               (1.0, 2.0, 3.0), (0.0, 0.0, 0.0), (5.0, -5.0, 5.0), (1.0, 1.0, 1.0), (0.0, 0.0, 0.0)]
    return np.vstack([q, edges_q]), np.vstack([u, edges_u])


def _same(a: float, b: float) -> bool:
    """The same double (NaN as NaN, -0.0 apart from 0.0)."""
    return np.float64(a).tobytes() == np.float64(b).tobytes() or (math.isnan(a) and math.isnan(b))


@pytest.mark.parametrize("i", range(4))
def test_rows_give_the_doubles_row_gives(i):
    m = _maps()[i]
    q, u = _states()
    arrays = m.rows(*q.T, *u.T)
    for k in range(len(q)):
        tx, ty, hd, tilt, rate = m.row(*q[k].tolist(), *u[k].tolist())
        want = (tx, ty, hd, tilt, *rate)
        got = tuple(float(a[k]) for a in arrays)
        assert all(_same(g, w) for g, w in zip(got, want)), (k, q[k], u[k], got, want)


def test_row_on_the_edges_is_what_the_conventions_say():
    """Upright reads zero; a quarter turn about x reads tilt_x = tilt = pi/2 (sim.core.frames:
    R = Rz(heading) Ry(tilt_y) Rx(tilt_x)); common practice, no source."""
    m = AttitudeMap(((1.0, 0.0, 0.0), (0.0, 1.0, 0.0), (0.0, 0.0, 1.0)), rotation_about_x_y(0.0, 0.0))
    assert m.row(0.0, 0.0, 0.0, 1.0, 0.0, 0.0, 0.0)[:4] == (0.0, 0.0, 0.0, 0.0)
    s = math.sqrt(0.5)
    tx, ty, hd, tilt, rate = m.row(s, 0.0, 0.0, s, 1.0, 0.0, 0.0)
    assert tx == pytest.approx(math.pi / 2) and tilt == pytest.approx(math.pi / 2)
    assert ty == pytest.approx(0.0, abs=1e-12) and hd == pytest.approx(0.0, abs=1e-12)
    assert rate == pytest.approx((1.0, 0.0, 0.0))


def _trial(path: str, *overrides: str, lazy: bool, monkeypatch):
    from sim.model.scenario_yaml import load_scenario
    from sim.run import attitude_rows
    from sim.run.trial import run_trial

    with monkeypatch.context() as mp:
        if not lazy:
            mp.setattr(attitude_rows, "wanted", lambda **_: False)
        else:
            seen = []
            real = attitude_rows.LazyAttitude.finish
            mp.setattr(attitude_rows.LazyAttitude, "finish", lambda self, rows: (seen.append(rows), real(self, rows)))
        result = run_trial(load_scenario(ROOT / path, overrides=overrides))
    if lazy:
        assert seen, "the trial did not keep rows raw"
    return result


SHORT = ("trial.duration=3", "trial.pushes=[{at: 1.5 s, impulse: [30 mN*m*s, -30 mN*m*s, 0]}]")
CASES = {
    "the corner cube with its pushes": ("scenarios/cube_corner.yaml",),
    "a delay past the next tick": ("scenarios/cube_corner.yaml", "sensors.delay=5 ms", *SHORT),
    "no delay": ("scenarios/cube_corner.yaml", "sensors.delay=0 ms", *SHORT),
    "a jittered loop": ("scenarios/cube_corner.yaml", "timing={compute_time: 1 ms, jitter: 0.5 ms}", *SHORT),
    "a fall": ("scenarios/cube_corner.yaml", "trial.start.tilt=[40 deg, 10 deg]", *SHORT),
}


@pytest.mark.parametrize("name", CASES)
def test_a_trial_keeping_rows_raw_records_the_same_trace(name, monkeypatch):
    path, *overrides = CASES[name]
    plain = _trial(path, *overrides, lazy=False, monkeypatch=monkeypatch)
    fast = _trial(path, *overrides, lazy=True, monkeypatch=monkeypatch)
    assert (fast.outcome, fast.trace.n, fast.message) == (plain.outcome, plain.trace.n, plain.message)
    for name_ in (*plain.trace.FLOAT_COLUMNS, "mode"):
        assert plain.trace.view(name_).tobytes() == fast.trace.view(name_).tobytes(), name_
