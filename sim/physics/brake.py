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
    """Raises each wheel's friction cap step by step after the brake is engaged.

    `apply(caps)` sets the wheels' Coulomb caps (N m, one per wheel) in the engine. The runner calls
    `engage()` / `release()` when the strategy's brake flag changes, and `step()` before every
    physics step while `active` is True.
    """

    def __init__(self, *, brake_n_m: Sequence[float | None], engage_s: Sequence[float | None],
                 coulomb_n_m: Sequence[float], step_s: float, apply: Callable[[list[float]], None]) -> None:
        self.brake = [b or 0.0 for b in brake_n_m]
        self.engage_s = [e or 0.0 for e in engage_s]
        self.coulomb = list(coulomb_n_m)
        self.step_s = step_s
        self.apply = apply
        self.active = False
        self._j = 0
        self._last = max(int(round(e / step_s)) + 1 for e in self.engage_s)   # steps until every ramp is full

    def engage(self) -> None:
        """The brake is on from the next physics step, ramping (the first step's cap is applied by `step`)."""
        self.active, self._j = True, 0

    def release(self) -> None:
        self.active = False
        self.apply(list(self.coulomb))

    def step(self) -> None:
        j = self._j
        self.apply([c + b * ramp_mean(j, self.step_s, e) for c, b, e in zip(self.coulomb, self.brake, self.engage_s)])
        self._j = j + 1
        if self._j > self._last:
            self.active = False      # full on every wheel: the cap stays where the last step left it
