"""The controller's timing on the physics step grid: when each tick samples, when its command
reaches the drive, and what happens when a tick overruns.

Placement (all on the physics step grid; `dt` the physics step, `cs` physics steps per control
period T):
- Tick n is due at n T. With `jitter` J it starts late by e_n, drawn uniform in [0, J) from the
  schedule's own seeded generator, and samples at step s_n = n cs + round(e_n / dt): the step
  nearest its jittered instant (a jitter under half a step therefore never moves a tick; use a
  finer physics step to resolve it).
- Its command reaches the drive at step a_n = s_n + round(compute_time / dt), and holds until the
  next command arrives. `sensors.delay` is separate: it ages the measurement taken at s_n.
- Overrun: tick n's command is late when a_n > s_(n+1) (still computing when the next tick
  starts; a_n = s_(n+1) is on time). Rule `skip`: the command is applied at a_n and every tick
  due before a_n is skipped (not sampled, no law call), each skipped tick counting as one
  overrun. Rule `hold`: the late command is dropped (the drive keeps the previous one), counting
  one overrun, and tick n+1 runs on time.
Without jitter and compute time (and without the `timing` section at all) tick n samples at
n cs and its command is applied on that same step, as the loop always did.
"""

from __future__ import annotations

import numpy as np

JITTER_CHUNK = 4096


class TickSchedule:
    """Answers, tick by tick, where the next tick samples and when this tick's command applies."""

    def __init__(self, timing, *, control_steps: int, step_s: float, rng: np.random.Generator,
                 end_step: int | None = None):
        self.cs = control_steps
        self.dt = step_s
        self.compute_steps = timing.compute_steps(step_s)
        self.jitter_s = timing.jitter
        self.skip = timing.overrun == "skip"
        self.rng = rng
        self.overruns = 0
        self.end_step = end_step   # ticks due at or after it (past the trial's end) are not counted
        self.n = 0                 # the nominal index of the tick that runs next
        self._offsets: list = []
        self._i = 0

    def _offset(self) -> int:
        """The next tick's lateness, whole steps (draws are consumed one per nominal tick)."""
        if not self.jitter_s:
            return 0
        if self._i >= len(self._offsets):
            e = self.rng.uniform(0.0, self.jitter_s, JITTER_CHUNK)
            self._offsets, self._i = np.rint(e / self.dt).astype(np.int64).tolist(), 0
        self._i += 1
        return self._offsets[self._i - 1]

    def first(self) -> int:
        """The step at which tick 0 samples."""
        self.n = 0
        self._next = self._offset()
        return self._next

    def after(self, k: int) -> tuple[int, int]:
        """For the tick that sampled at step k: (step its command applies, or -1 when dropped;
        step the next tick samples)."""
        apply_k = k + self.compute_steps
        self.n += 1
        nxt = self.n * self.cs + self._offset()
        if apply_k > nxt:
            if self.skip:
                while apply_k > nxt:
                    if self.end_step is None or nxt < self.end_step:
                        self.overruns += 1
                    self.n += 1
                    nxt = self.n * self.cs + self._offset()
            else:
                if self.end_step is None or nxt < self.end_step:
                    self.overruns += 1
                apply_k = -1
        return apply_k, nxt
