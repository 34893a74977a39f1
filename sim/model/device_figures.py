"""The derived figures `validate` prints: what a builder checks before buying parts.

All SI in the keys' units; angles also in degrees and speeds also in rpm where a person reads them.
"""

from __future__ import annotations

import math


def device_figures(device) -> dict:
    """Derived figures of a device (sim.model.device.Device), keys with units.

    Stall torque is given twice: with the supply across the winding alone (k_t V / R) and with the
    drive's current limit applied (k_t min(V/R, I_max)); the second is what the motor can give.
    The largest angle the motor can hold is asin(stall torque / (mbar g)) (static torque balance,
    common practice, no source); the open-loop pole sqrt(mbar g / J) is how fast a lean grows.
    """
    mgd = device.gravity_torque_coeff_n_m
    stall_supply = device.k_t_n_m_a * device.supply_v / device.resistance_ohm
    stall = device.stall_torque_n_m
    mass = device.mass_kg
    return {
        "mass_kg": mass,
        "centre_of_mass_from_pivot_m": device.mbar_kg_m / mass if mass > 0 else 0.0,
        "mbar_g_n_m": mgd,
        "body_inertia_about_pivot_kg_m2": device.J_kg_m2,
        "wheel_spin_inertia_kg_m2": device.I_w_kg_m2,
        "open_loop_pole_rad_s": device.open_loop_pole_rad_s,
        "no_load_speed_rad_s": device.no_load_speed_rad_s,
        "no_load_speed_rpm": device.no_load_speed_rad_s * 60.0 / (2.0 * math.pi),
        "stall_torque_supply_only_n_m": stall_supply,
        "stall_torque_with_current_limit_n_m": stall,
        "current_limited": math.isfinite(device.current_limit_a) and device.current_limit_a < device.supply_v / device.resistance_ohm,
        "largest_holdable_angle_rad": device.holdable_angle_rad,
    }


def strategy_in_use(spec, device) -> dict:
    """The strategy's parameters as the trial will run them: the scenario's values, and for the
    ones left to a default, the value the built law derives from the device (when it exposes one)."""
    import numpy as np

    law = spec.build(device, rng=np.random.default_rng(0))
    out = {}
    for name, value in spec.params.model_dump().items():
        if value is None and isinstance(getattr(law, name, None), (int, float)):
            out[name] = (float(getattr(law, name)), "default")
        elif isinstance(value, dict) and "kind" in value:
            out[name] = (value["kind"], "nested law")
        else:
            out[name] = (value, "scenario" if name in spec.params.model_fields_set else "default")
    return out


def power_text(sc) -> list[str]:
    """The power chain's set-up in a line or two (nothing when it is off: today's ideal source)."""
    if not sc.power_model:
        return []
    d = sc.drive
    b = sc.battery
    lines = []
    if b is not None:
        r = b.internal_resistance if b.internal_resistance is not None else b.cell_resistance * b.cells
        lines.append(f"supply: {b.cells}-cell {b.chemistry} pack at {b.state_of_charge:.0%} charge, {d.supply:.2f} V at "
                     f"rest, {r:.3g} ohm, cut-off {b.cells * b.cutoff_per_cell:.2f} V (the figures above use the rest "
                     "voltage; the trial sags it)")
    else:
        lines.append(f"supply: bench {d.supply:.3g} V, cannot sink" if d.bus_capacitance is not None
                     else f"supply: bench {d.supply:.3g} V")
    parts = [f"{d.mode} mode" + (f", current loop {d.current_bandwidth:.4g} Hz" if d.mode == "current" else "")]
    if d.pwm is not None and d.pwm.frequency is not None:
        p = d.pwm
        parts.append(f"PWM {p.resolution_bits} bit at {p.frequency / 1e3:.4g} kHz, dead time {p.dead_time * 1e6:.3g} us, "
                     f"min duty {p.min_duty:.3g}")
    if d.bus_capacitance is not None:
        parts.append(f"bus {d.bus_capacitance * 1e6:.4g} uF" + (f", limit {d.max_bus_voltage:.3g} V"
                                                                   if d.max_bus_voltage is not None else ""))
    if d.reversal_delay is not None:
        parts.append(f"reversal {d.reversal_delay * 1e3:.3g} ms")
    if d.trip is not None:
        parts.append(f"trip above {d.trip.current:.3g} A for {d.trip.time * 1e3:.3g} ms")
    # the shared motor, or on a 3D device each wheel's own (`wheels[i].motor`)
    motors = [("motor", sc.motor)] if sc.motor is not None else []
    motors += [(f"wheel {i} motor", w.motor) for i, w in enumerate(getattr(sc, "wheels", None) or [], start=1)
               if getattr(w, "motor", None) is not None]
    for name, motor in motors:
        if motor.curve is not None:
            parts.append(f"{name} curve at {motor.curve.voltage:.3g} V")
    if any(motor.thermal.coupled for _, motor in motors):
        parts.append("winding heat coupled")
    lines.append("drive: " + "; ".join(parts))
    return lines


def figures_text(device, spec) -> list[str]:
    """Lines for the terminal."""
    f = device_figures(device)
    lines = [
        f"mass {f['mass_kg'] * 1000:.1f} g, centre of mass {f['centre_of_mass_from_pivot_m'] * 1000:.1f} mm from the "
        f"pivot, mbar g {f['mbar_g_n_m'] * 1000:.2f} mN m",
        f"J {f['body_inertia_about_pivot_kg_m2']:.4g} kg m^2 about the pivot, wheel I_w "
        f"{f['wheel_spin_inertia_kg_m2']:.4g} kg m^2, open-loop pole sqrt(mbar g / J) {f['open_loop_pole_rad_s']:.3g} rad/s",
        f"no-load speed {f['no_load_speed_rad_s']:.1f} rad/s ({f['no_load_speed_rpm']:.0f} rpm) at the supply",
        f"stall torque {f['stall_torque_supply_only_n_m'] * 1000:.1f} mN m from the supply alone (k_t V/R), "
        f"{f['stall_torque_with_current_limit_n_m'] * 1000:.1f} mN m with the current limit"
        + (" (the limit binds)" if f["current_limited"] else " (the limit does not bind)"),
        f"largest angle the motor can hold: {math.degrees(f['largest_holdable_angle_rad']):.3g} deg "
        "(asin of stall torque over mbar g)",
        f"strategy {spec.kind}:",
    ]
    for name, (value, source) in strategy_in_use(spec, device).items():
        shown = f"{value:.6g}" if isinstance(value, float) else str(value)
        lines.append(f"  {name} = {shown} ({source})")
    return lines
