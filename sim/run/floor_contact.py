"""A body on the floor during a trial: its contact per step, the `slipped` outcome, where it came to rest.

Per physics step `FloorWatch.see` records the balancing contact's world x, y (the body frame's origin),
whether the body touches the floor and |F_t| / F_n over its floor contacts (the friction the motion
asked of the floor) in the trace's floor columns. From the first step at which the law balances, the
contact's horizontal travel is measured from where it was then; past `floor.slip_limit` the trial is
`slipped` (the slip came before any fall; a slip after the fall is part of the fall). A law that gets
the body up again after a fall (a jump) starts a new episode at its next catch: the travel is then
measured from where the contact was at that catch (the fall's own slide is not a slip while balancing).

After the trial, `summary` gives the metrics' floor keys: `slip_m` (the largest travel while balancing,
up to the fall, over every episode), `lift_off_s` (time without floor contact over the trial), `rest_face` (the face nearest
to facing the floor at the end, `sim.model.floor.face_down`, when it lies on it: within REST_COS of
straight down and the body still; else None), `peak_friction_ratio` (the largest |F_t| / F_n while
balancing, up to the fall) against `floor_friction`; `lifted` (the balancing contact left the floor for
longer than LIFT_LIMIT_S at a stretch while balancing), `lifted_at_s` (when that stretch began),
`longest_lift_off_s` (the longest stretch while balancing) and `lift_limit_s`. A fall after a lift-off has the
cause `contact_lifted` (the fall's own cause follows in its sentence); a balanced trial that lifted stays
`balanced`, its `lifted` saying so.
"""

from __future__ import annotations

import math

import numpy as np

from ..model.floor import face_down

REST_COS = math.cos(math.radians(5.0))   # a face within 5 deg of straight down lies on the floor (our choice)
REST_RATE_RAD_S = 0.05                   # ... and the body turns slower than this (our choice)
LIFT_LIMIT_S = 0.005
"""A balancing contact off the floor longer than this, while balancing, is a lift-off (`lifted`): 5 ms, two
and a half control ticks at 500 Hz, longer than the step or two a contact flickers while it settles or
takes an impact (our choice)."""


class FloorWatch:
    """The runner's floor bookkeeping (see the module docstring). `contact` is the engine's closure."""

    def __init__(self, contact, trace, floor, stop_early: bool):
        self.contact, self.trace, self.floor, self.stop_early = contact, trace, floor, stop_early
        self.cols = (memoryview(trace.contact_x), memoryview(trace.contact_y), memoryview(trace.contact_z),
                     memoryview(trace.in_contact), memoryview(trace.friction_ratio))
        self.limit2 = floor.slip_limit_m ** 2
        self.origin = None        # the contact's (x, y) when balancing (this episode) began
        self.slipped_k = None
        self.balance_k = None
        self.break_k = None       # the step at which this episode's balancing stopped, if it did
        self.episodes = []        # earlier episodes (first step, step balancing stopped) of a law that gets up again
        self.fell_k = None

    def stepper(self):
        """see(k, balancing) -> bool: record step k; True when the trial should end now as `slipped`
        (with stop_early). A closure with its lookups bound once: it runs every physics step."""
        contact, stop_early, limit2 = self.contact, self.stop_early, self.limit2
        cx, cy, cz, ct, cr = self.cols

        def see(k, balancing):
            x, y, z, touching, ratio = contact()
            cx[k], cy[k], cz[k], ct[k], cr[k] = x, y, z, touching, ratio
            if not balancing:
                if self.origin is not None and self.break_k is None:
                    self.break_k = k          # balancing stopped (a fall): a later catch starts a new episode
                return False
            if self.slipped_k is not None:
                return False
            if self.origin is None or self.break_k is not None:
                if self.break_k is not None:
                    self.episodes.append((self.balance_k, self.break_k))
                self.origin, self.balance_k, self.break_k = (x, y), k, None
                return False
            dx, dy = x - self.origin[0], y - self.origin[1]
            if dx * dx + dy * dy > limit2:
                self.slipped_k = k
                return stop_early
            return False
        return see

    def outcome(self, outcome, fell_k):
        """The trial's outcome with a slip before any fall counted: `slipped`."""
        self.fell_k = fell_k
        slipped_first = self.slipped_k is not None and (fell_k is None or self.slipped_k <= fell_k)
        if slipped_first and outcome in (None, "fell", "slipped"):
            return "slipped"
        return outcome

    def summary(self, engine, dt: float) -> dict:
        tr = self.trace
        n = tr.n
        stop = n
        fell = self.fell_k
        x, y, touch, ratio = tr.contact_x[:n], tr.contact_y[:n], tr.in_contact[:n], tr.friction_ratio[:n]
        slip = 0.0
        peak_ratio = None
        episodes = list(self.episodes)    # earlier episodes from their own starts (none for most trials)
        if self.balance_k is not None and self.balance_k < stop:
            b = self.balance_k
            end = stop if fell is None else min(stop, fell)
            slip = float(np.max(np.hypot(x[b:end] - x[b], y[b:end] - y[b]))) if end > b else 0.0
            peak_ratio = float(np.max(ratio[b + 1:end])) if end > b + 1 else None
            episodes.append((b, end))
        for b, end in self.episodes:
            slip = max(slip, float(np.max(np.hypot(x[b:end] - x[b], y[b:end] - y[b]))) if end > b else 0.0)
            if end > b + 1:
                peak_ratio = max(peak_ratio or 0.0, float(np.max(ratio[b + 1:end])))
        longest, lifted_k = off_floor(touch, episodes, limit_steps=LIFT_LIMIT_S / dt)
        face, cos_down = face_down(engine.attitude())
        rates = engine.pb.getBaseVelocity(engine.body_id, physicsClientId=engine.client)[1]
        still = math.sqrt(sum(w * w for w in rates)) < REST_RATE_RAD_S
        return {"slip_m": slip, "slip_limit_m": self.floor.slip_limit_m,
                "slipped_at_s": self.slipped_k * dt if self.slipped_k is not None else None,
                "lift_off_s": float(np.count_nonzero(touch[1:] == 0.0)) * dt,   # row 0: no step taken yet
                "rest_face": face if cos_down >= REST_COS and still else None,
                "peak_friction_ratio": peak_ratio, "floor_friction": self.floor.friction,
                "floor_restitution": self.floor.restitution, "balance_on": self.floor.balance_on,
                "lifted": lifted_k is not None, "lifted_at_s": lifted_k * dt if lifted_k is not None else None,
                "longest_lift_off_s": longest * dt, "lift_limit_s": LIFT_LIMIT_S}


def off_floor(touch, episodes, *, limit_steps: float) -> tuple[int, int | None]:
    """(the longest run of steps without floor contact inside the balancing episodes [b, end), the first
    step of the first such run longer than `limit_steps`, or None). Row 0 holds no step: left out."""
    longest, first = 0, None
    for b, end in episodes:
        off = np.concatenate(([0], (touch[max(b, 1):end] == 0.0).astype(np.int8), [0]))
        edges = np.flatnonzero(np.diff(off))
        starts, lengths = edges[0::2], edges[1::2] - edges[0::2]
        if lengths.size:
            longest = max(longest, int(lengths.max()))
            long_runs = starts[lengths > limit_steps]
            if long_runs.size and first is None:
                first = int(long_runs[0]) + max(b, 1)
    return longest, first


def floor_cause(result):
    """(cause, sentence) for a floor trial the contact explains (`slipped`; a fall after a lift-off,
    `contact_lifted`); a fall's own cause with the face it came to rest on; else None."""
    f = result.floor
    if result.outcome == "fell" and f["lifted"] and result.fell_at_s is not None and f["lifted_at_s"] <= result.fell_at_s:
        own = f"; then {result.cause_detail}" if result.cause_detail else ""
        rest = f"; it came to rest on its {f['rest_face']}" if f["rest_face"] else ""
        return "contact_lifted", (f"the balancing contact left the floor at t = {f['lifted_at_s']:.3f} s while "
                                  f"balancing (longest off the floor {f['longest_lift_off_s'] * 1e3:.1f} ms, limit "
                                  f"{f['lift_limit_s'] * 1e3:g} ms){own}{rest}")
    if result.outcome == "fell" and result.cause_detail and result.floor["rest_face"]:
        return result.cause, f"{result.cause_detail}; it came to rest on its {result.floor['rest_face']}"
    if result.outcome != "slipped":
        return None
    f = result.floor
    ratio = f["peak_friction_ratio"]
    asked = f", the motion asking up to {ratio:.2f} of the normal force in friction" if ratio is not None else ""
    return "contact_slipped", (f"the balancing contact slid {f['slip_m'] * 1e3:.1f} mm (limit "
                               f"{f['slip_limit_m'] * 1e3:g} mm) by t = {f['slipped_at_s']:.3f} s on a floor of "
                               f"friction {f['floor_friction']:g}{asked}")
