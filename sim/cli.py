"""The `wheelbench` command line. Commands only parse options and call plain functions."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import List, Optional

import typer

from .errors import WheelbenchError

app = typer.Typer(add_completion=False, pretty_exceptions_enable=False, no_args_is_help=True,
                  help="Design checks for reaction-wheel balancing devices.")

SAFETY = ("Safety: a spinning wheel stores energy and can burst. Guard it and stay out of its plane; "
          "retain the hub positively; set a software speed limit and a hardware stop; braking "
          "regenerates into the supply; handle LiPo packs with a balance charger, never unattended. "
          "Follow local codes and licensed practice.")

ScenarioArg = typer.Argument(None, help="Scenario YAML file (default: the bundled desk pendulum).",
                             show_default=False)
SetOpt = typer.Option(None, "--set", help="Override a scenario value: key.path=value (repeatable).")
SeedOpt = typer.Option(None, "--seed", help="Seed for all randomness (default: the scenario's trial.seed).")


def _load(scenario: Optional[Path], overrides: Optional[List[str]]):
    from .scenario import load_scenario
    return load_scenario(scenario, overrides=tuple(overrides or ()))


@app.command()
def run(scenario: Optional[Path] = ScenarioArg,
        out: Path = typer.Option(Path("runs/latest"), "--out", help="Output folder."),
        set_: Optional[List[str]] = SetOpt, seed: Optional[int] = SeedOpt,
        force: bool = typer.Option(False, "--force", help="Write into a non-empty folder not made by wheelbench.")):
    """Simulate one trial; write metrics.json, trace.csv and summary.png."""
    from .runfiles import run_to_folder
    sc = _load(scenario, set_)
    result, metrics = run_to_folder(sc, out, seed=seed, force=force)
    _print_run(sc, metrics, out)


@app.command()
def validate(scenario: Path = typer.Argument(..., help="Scenario YAML file."),
             set_: Optional[List[str]] = SetOpt):
    """Check a scenario file and print its derived device figures."""
    from .device import Device
    sc = _load(scenario, set_)
    d = Device.from_scenario(sc)
    typer.echo(f"{scenario}: valid. mass {d.mass_kg * 1000:.1f} g, J {d.J_kg_m2:.4g} kg m^2, "
               f"wheel I_w {d.I_w_kg_m2:.4g} kg m^2, no-load speed {d.no_load_speed_rad_s:.1f} rad/s, "
               f"stall torque {d.stall_torque_n_m * 1000:.1f} mN m, strategy {sc.strategy.kind}")


@app.command()
def gains(scenario: Optional[Path] = ScenarioArg,
          format_: str = typer.Option("json", "--format", help="json or c (a C header)."),
          set_: Optional[List[str]] = SetOpt):
    """Print the balance law's LQR gains for firmware (stdout)."""
    from .errors import InputError
    from .gains import gains_report, to_c_header, to_json
    if format_ not in ("json", "c"):
        raise InputError(f"--format: expected 'json' or 'c', found {format_!r}")
    report = gains_report(_load(scenario, set_))
    typer.echo(to_json(report) if format_ == "json" else to_c_header(report), nl=format_ == "json")


def _print_run(sc, m: dict, out: Path) -> None:
    from rich.console import Console
    from rich.table import Table

    console = Console()
    table = Table(title=f"{sc.name} - {m['strategy']}", show_header=False, box=None)
    rows = [
        ("outcome", m["outcome"] + (f" ({m['message']})" if m.get("message") else "")),
        ("caught at", _fmt(m["caught_at_s"], "s")), ("settle time", _fmt(m["settle_time_s"], "s")),
        ("peak wheel speed", f"{_fmt(m['peak_wheel_speed_rad_s'], 'rad/s')} of {m['wheel_speed_limit_rad_s']:.1f} rad/s"),
        ("peak current", f"{_fmt(m['peak_current_a'], 'A')} (rms {_fmt(m['rms_current_a'], 'A')})"),
        ("voltage saturated", f"{100 * m['voltage_saturated_fraction']:.1f}% of ticks"),
        ("energy from supply", _fmt(m["energy_from_supply_j"], "J")),
        ("real-time factor", _fmt(m["real_time_factor"], "x")),
    ]
    for p in m.get("pushes", []):
        rows.append((f"push {p['impulse_n_m_s'] * 1000:.1f} mN m s at {p['at_s']:.2f} s",
                     "survived" if p["survived"] else "not survived"))
    for k, v in rows:
        table.add_row(k, v)
    console.print(table)
    console.print(f"wrote {out}/metrics.json, trace.csv, summary.png")


def _fmt(value, unit: str) -> str:
    return "-" if value is None else f"{value:.4g} {unit}"


def main(argv: Optional[list[str]] = None) -> int:
    """Entry point: our errors become one line on stderr and exit code 2."""
    try:
        app(args=argv, standalone_mode=False)
    except WheelbenchError as exc:
        print(f"wheelbench: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("wheelbench: interrupted", file=sys.stderr)
        return 130
    except SystemExit as exc:
        return exc.code if isinstance(exc.code, int) else 0
    except Exception as exc:  # click's usage errors arrive here in non-standalone mode
        import click
        if isinstance(exc, click.exceptions.ClickException):
            exc.show()
            return 2
        if isinstance(exc, click.exceptions.Abort):
            print("wheelbench: aborted", file=sys.stderr)
            return 1
        raise
    return 0


if __name__ == "__main__":
    sys.exit(main())


def entry() -> None:
    """Console-script wrapper: exit with main()'s code."""
    sys.exit(main())
