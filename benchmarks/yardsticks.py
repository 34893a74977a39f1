"""Yardsticks for the speed benchmarks, measured on the same device as the trial they judge.

(a) `bare_engine_rtf`: pybullet stepping the device's two-joint body at the physics step with
    one batched joint-state read and one batched torque command per step, nothing else. This
    is the engine's own pace: no simulator can run the same model faster through pybullet.
(b) `solve_ivp_rtf`: the hand-written alternative, scipy's solve_ivp (RK45) integrating the
    textbook reaction-wheel pendulum with a DC motor (inductance neglected) between control
    updates, with the same discrete LQR gains held over each control period.

Each returns the real-time factor: simulated seconds per wall-clock second.
"""

from __future__ import annotations

import math
import time

import numpy as np


def bare_engine_rtf(device, *, step_s: float, seconds: float) -> float:
    """Real-time factor of the bare pybullet loop for `device` at `step_s` over `seconds`."""
    from sim.physics.engine import EngineModel

    engine = EngineModel(device, step_s=step_s, start_angle_rad=0.0)
    try:
        pb, cid, body = engine.pb, engine.client, engine.body_id
        engine.reset(angle_rad=0.05, rate_rad_s=0.0)
        states, torques, step = pb.getJointStates, pb.setJointMotorControlArray, pb.stepSimulation
        joints, mode, unused = (0, 1), pb.TORQUE_CONTROL, (0.0, 0.0)
        n = int(round(seconds / step_s))
        t0 = time.perf_counter()
        for _ in range(n):
            # the fastest call forms, as the engine uses them: every argument positional
            s = states(body, joints, cid)
            # a torque that depends on the read, so the read cannot be skipped; the body is
            # gently held near upright (the figure must not depend on it falling over)
            torques(body, joints, mode, unused, unused, (-0.5 * s[0][0] - 0.05 * s[0][1], 0.0), unused, unused, cid)
            step(cid)
        wall = time.perf_counter() - t0
    finally:
        engine.close()
    return seconds / wall


def pendulum_rhs(device):
    """Right-hand side f(t, x, volts) of the textbook model, x = [theta, theta_d, phi_d].

    J theta_dd = mbar g sin(theta) - tau, I_w (theta_dd + phi_dd) = tau,
    tau = k_t (V - k_e phi_d) / R (references.md, "Reaction-wheel pendulum dynamics";
    Spong, Corke, Lozano, Automatica 37(11), 2001).
    """
    J, Iw = device.J_kg_m2, device.I_w_kg_m2
    mg = device.gravity_torque_coeff_n_m
    kt, ke, r = device.k_t_n_m_a, device.k_e_v_s_rad, device.resistance_ohm

    def rhs(t, x, volts):
        tau = kt * (volts - ke * x[2]) / r
        theta_dd = (mg * math.sin(x[0]) - tau) / J
        return [x[1], theta_dd, tau / Iw - theta_dd]

    return rhs


def solve_ivp_rtf(device, *, seconds: float, start_angle_rad: float = 0.05) -> tuple[float, np.ndarray]:
    """Real-time factor of LQR + solve_ivp between control updates; also the final state."""
    from scipy.integrate import solve_ivp

    from sim.strategies.lqr_design import design_lqr

    period = 1.0 / device.control_rate_hz
    K = design_lqr(device).K_discrete
    rhs = pendulum_rhs(device)
    x = np.array([start_angle_rad, 0.0, 0.0])
    n = int(round(seconds / period))
    supply = device.supply_v
    t0 = time.perf_counter()
    for i in range(n):
        volts = min(max(-float(K @ x), -supply), supply)
        sol = solve_ivp(rhs, (i * period, (i + 1) * period), x, args=(volts,), rtol=1e-6, atol=1e-9)
        x = sol.y[:, -1]
    wall = time.perf_counter() - t0
    return seconds / wall, x
