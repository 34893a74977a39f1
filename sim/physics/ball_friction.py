"""Coulomb friction at a ball mount: a torque of magnitude tau_c against the body's rate, or a hold.

Coulomb's law of dry friction: while the surfaces slide the friction has the fixed magnitude mu N and
opposes the sliding velocity; while they stick it takes whatever value up to mu N holds them (common
practice, no source). At a ball socket the friction torque is tau_c (N m, the scenario's
`body.pivot_friction.coulomb`) against the body's angular velocity relative to the socket.

Two regimes, chosen every physics step from the body rate read at its start (principal axes, rad/s):
- sliding (|w| above `stick_rate_rad_s`, the rate tau_c could remove in one step about the body's
  least principal moment of inertia): the torque -tau_c w / |w| (N m, principal axes), applied with
  the step's other pivot torques; exact for a constant deceleration, and it cannot overshoot zero;
- sticking: pybullet's spherical-joint motor with target rate 0 and a force cap of tau_c. pybullet
  3.2.7 takes one cap for all three axes of that motor (the first of the three it is handed; seen by
  experiment), so the hold is up to tau_c about each principal axis of the body and up to
  sqrt(3) tau_c about a diagonal of them: a sticking socket is modelled a little stronger than the
  law about oblique axes. A load the hold cannot take starts the body turning, and it slides.
"""

from __future__ import annotations

import math


class BallFriction:
    """Per step: the sliding torque and whether the sticking hold is on.

    `coulomb_n_m`: tau_c, N m; `least_inertia_kg_m2`: the least principal moment of inertia about the
    pivot (wheels' spin left out); `step_s`: the physics step, s.
    """

    def __init__(self, coulomb_n_m: float, *, least_inertia_kg_m2: float, step_s: float):
        self.coulomb_n_m = float(coulomb_n_m)
        self.stick_rate_rad_s = self.coulomb_n_m * step_s / max(least_inertia_kg_m2, 1e-12)
        self.holding = True          # a body at rest sticks until a load breaks it free

    def torque(self, wx: float, wy: float, wz: float) -> tuple[float, float, float] | None:
        """The sliding torque (N m, the rate's axes) for one step, or None while sticking (the hold acts)."""
        norm = math.sqrt(wx * wx + wy * wy + wz * wz)
        if norm <= self.stick_rate_rad_s:
            self.holding = True
            return None
        self.holding = False
        s = -self.coulomb_n_m / norm
        return (s * wx, s * wy, s * wz)
