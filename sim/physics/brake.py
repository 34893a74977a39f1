"""A wheel brake that takes time to engage: its torque ramps from 0 to full over the engagement time.

Inputs and outputs, per wheel: the brake's full torque T_b (N m), its engagement time t_e (s; 0 or
None: full at once), the bearing's own Coulomb friction T_c (N m) and the physics step dt (s); out,
once per physics step while engaging, the Coulomb friction cap of the wheel's joint for that step,
T_c + T_b r_j, N m. A brake is a Coulomb friction torque on both engines (a zero-target velocity
motor whose force is capped: it holds the wheel to the body only while the torque needed stays
under the cap, and slips otherwise), so a ramped brake is that cap raised step by step.

r_j is the mean of min(1, t / t_e) over step j (t from the step the brake was engaged on), so the
impulse summed over the steps is exactly the ramp's integral: a wheel slipping through the whole ramp
loses T_b t^2 / (2 t_e) of momentum by time t <= t_e (on grid points). Release is instant (the brief
is about engagement; a releasing brake's own time is not modelled).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence


def ramp_mean(j: int, step_s: float, engage_s: float) -> float:
    """The mean of min(1, t / engage_s) over step j, t in [j step_s, (j + 1) step_s] (1 when engage_s <= 0)."""
    if engage_s <= 0.0:
        return 1.0
    a, b = j * step_s, (j + 1) * step_s
    if b <= engage_s:
        return (a + b) / (2.0 * engage_s)
    if a >= engage_s:
        return 1.0
    # the step that holds the ramp's end: part rising, part flat
    rising = (engage_s - a) * (a + engage_s) / (2.0 * engage_s)
    return (rising + (b - engage_s)) / step_s


class BrakeRamp:
    """Raises each engaged wheel's friction cap step by step after its brake is engaged.

    `apply(caps)` sets the wheels' Coulomb caps (N m, one per wheel) in the engine. The runner calls
    `set(flags)` (one truth value per wheel) when the strategy's brake changes, and `step()` before
    every physics step while `active` is True. A wheel engaged anew starts its ramp from 0 on the next
    step; a wheel released drops to its bearing's friction at once; one already engaged keeps its ramp.
    """

    def __init__(self, *, brake_n_m: Sequence[float | None], engage_s: Sequence[float | None],
                 coulomb_n_m: Sequence[float], step_s: float, apply: Callable[[list[float]], None]) -> None:
        self.brake = [b or 0.0 for b in brake_n_m]
        self.engage_s = [e or 0.0 for e in engage_s]
        self.coulomb = list(coulomb_n_m)
        self.step_s = step_s
        self.apply = apply
        self.active = False
        self._j: list[int | None] = [None] * len(self.brake)     # steps since each wheel's brake engaged
        # the step from which each wheel's ramp is full
        self._full = [math.ceil(e / step_s - 1e-9) for e in self.engage_s]

    def set(self, flags: Sequence[bool]) -> None:
        """Engage (True) or release (False) each wheel's brake."""
        for i, on in enumerate(flags):
            if not on:
                self._j[i] = None
            elif self._j[i] is None:
                self._j[i] = 0
        self.active = self._ramping()
        if not self.active:         # nothing ramps: the caps change now (released, or still full)
            self.apply(self._caps())

    def step(self) -> None:
        self.apply(self._caps())
        self._j = [None if j is None else j + 1 for j in self._j]
        self.active = self._ramping()

    def _caps(self) -> list[float]:
        return [c + (0.0 if j is None else b * ramp_mean(j, self.step_s, e))
                for c, b, e, j in zip(self.coulomb, self.brake, self.engage_s, self._j)]

    def _ramping(self) -> bool:
        return any(j is not None and j <= full for j, full in zip(self._j, self._full))
