"""Reading CSV bench logs: units from the header, wrapped angles, uneven times, clear errors.

Unit factors checked here are definitions (1 rev = 2 pi rad, 1 min = 60 s, 1 deg = pi/180 rad;
common practice, no source). Every bad-input case must raise InputError naming the file.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from sim.core.errors import InputError
from sim.fit.logs import normalise_header, read_log, resample_uniform


def write_csv(path, header: list[str], rows) -> str:
    lines = [",".join(header)] + [",".join(str(v) for v in row) for row in rows]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return str(path)


def test_trace_header_reads_si_and_ignores_other_columns(tmp_path):
    t = np.arange(20) * 0.01
    rows = [(ti, 0.1 * i, 1.0, 2.0 * i, 6.0, 0.5, 0.0, "hold") for i, ti in enumerate(t)]
    header = ["t_s", "angle_rad", "rate_rad_s", "wheel_speed_rad_s", "voltage_v", "current_a",
              "measured_angle_rad", "mode"]
    log = read_log(write_csv(tmp_path / "a.csv", header, rows))
    assert set(log.columns) == {"angle_rad", "wheel_speed_rad_s", "voltage_v", "current_a"}
    assert_allclose(log.t_s, t, rtol=0, atol=1e-15)
    assert_allclose(log.columns["wheel_speed_rad_s"], 2.0 * np.arange(20), rtol=1e-15)


def test_other_units_convert_to_si(tmp_path):
    # 1 rpm = 2 pi / 60 rad/s; 1 deg = pi / 180 rad; 1 ms = 1e-3 s (definitions; common practice, no source)
    rows = [(10 * i, 3 * i, 60 * i, 500, 250) for i in range(12)]
    log = read_log(write_csv(tmp_path / "b.csv", ["t_ms", "angle_deg", "wheel_speed_rpm", "voltage_mv",
                                                   "current_ma"], rows))
    i = np.arange(12)
    assert_allclose(log.t_s, 0.01 * i, rtol=1e-12)
    assert_allclose(log.columns["angle_rad"], math.radians(3) * i, rtol=1e-12)
    assert_allclose(log.columns["wheel_speed_rad_s"], 2 * math.pi * i, rtol=1e-12)
    assert_allclose(log.columns["voltage_v"], 0.5, rtol=1e-12)
    assert_allclose(log.columns["current_a"], 0.25, rtol=1e-12)


def test_bracketed_units_in_header(tmp_path):
    assert normalise_header(" Wheel speed [rad/s] ") == "wheel_speed_rad_s"
    assert normalise_header("angle (deg)") == "angle_deg"
    rows = [(0.01 * i, 2 * i) for i in range(12)]
    log = read_log(write_csv(tmp_path / "c.csv", ["t [s]", "Angle (deg)"], rows))
    assert_allclose(log.columns["angle_rad"], np.radians(2.0 * np.arange(12)), rtol=1e-12)


def test_wrapped_angles_are_unwrapped(tmp_path):
    # a body hanging at pi and swinging 0.5 rad: logged wrapped to (-pi, pi] it jumps across the seam
    t = np.linspace(0.0, 2.0, 400)
    true = math.pi + 0.5 * np.sin(2 * math.pi * t)
    wrapped = np.angle(np.exp(1j * true))
    assert np.ptp(wrapped) > 6.0  # the log really does jump
    log = read_log(write_csv(tmp_path / "d.csv", ["t_s", "angle_rad"], zip(t, wrapped)))
    angle = log.columns["angle_rad"]
    shift = angle[0] - true[0]
    assert_allclose(shift / (2 * math.pi), round(shift / (2 * math.pi)), atol=1e-9)
    assert_allclose(angle - shift, true, atol=1e-9)


def test_uneven_times_accepted_and_resampled(tmp_path):
    rng = np.random.default_rng(3)
    t = np.sort(rng.uniform(0.0, 1.0, 200))
    log = read_log(write_csv(tmp_path / "e.csv", ["t_s", "angle_rad"], zip(t, 2.0 * t)))
    grid, x = resample_uniform(log.t_s, log.columns["angle_rad"])
    assert_allclose(np.diff(grid), np.median(np.diff(t)), rtol=1e-9)
    assert_allclose(x, 2.0 * grid, atol=1e-12)  # linear interpolation is exact on a line


def test_comment_lines_and_blank_lines_skipped(tmp_path):
    p = tmp_path / "f.csv"
    p.write_text("# bench log, our own\n\nt_s,angle_rad\n" + "".join(f"{0.1 * i},{i}\n" for i in range(11)))
    assert len(read_log(p).t_s) == 11


@pytest.mark.parametrize("header, rows, words", [
    (["angle_rad"], [(i,) for i in range(12)], ["missing column t_s"]),
    (["t_s", "angle"], [(i, i) for i in range(12)], ["'angle' has no unit", "angle_rad"]),
    (["t_s", "angle_grad"], [(i, i) for i in range(12)], ["unknown unit 'grad'"]),
    (["t_s", "angle_rad", "angle_deg"], [(i, i, i) for i in range(12)], ["both give angle"]),
    (["t_s", "angle_rad"], [(i, "x" if i == 5 else i) for i in range(12)], ["'angle_rad'", "data row 6", "'x'"]),
    (["t_s", "angle_rad"], [(i if i != 7 else 3, i) for i in range(12)], ["'t_s' must increase", "data row 8"]),
    (["t_s", "angle_rad"], [(i, i) for i in range(3)], ["only 3 data rows"]),
    (["t_s", "angle_rad"], [(i, "nan") for i in range(12)], ["not finite"]),
])
def test_bad_logs_name_file_and_column(tmp_path, header, rows, words):
    path = write_csv(tmp_path / "bad.csv", header, rows)
    with pytest.raises(InputError) as info:
        read_log(path)
    message = str(info.value)
    assert message.startswith(path)
    for word in words:
        assert word in message
    assert "\n" not in message


def test_missing_file_and_empty_file(tmp_path):
    with pytest.raises(InputError, match="cannot read"):
        read_log(tmp_path / "nope.csv")
    (tmp_path / "empty.csv").write_text("# nothing\n")
    with pytest.raises(InputError, match="empty"):
        read_log(tmp_path / "empty.csv")


def test_require_names_the_missing_column(tmp_path):
    log = read_log(write_csv(tmp_path / "g.csv", ["t_s", "angle_rad"], [(i, i) for i in range(12)]))
    with pytest.raises(InputError) as info:
        log.require("wheel_speed_rad_s", why="a coast-down is fitted to the wheel speed")
    message = str(info.value)
    assert "g.csv" in message and "wheel_speed_rad_s" in message and "wheel_speed_rpm" in message


# --------------------------------------------------------------------- broken time columns, bounded memory (issue 13)

def _swing_rows(n: int, *, rate_hz: float = 100.0):
    return [(i / rate_hz, 0.1 * math.cos(2 * math.pi * i / rate_hz)) for i in range(n)]


def _broken_logs(tmp_path):
    good = _swing_rows(50)
    jump = [*good[:-1], (1e6, good[-1][1])]              # one bad timestamp: the last row 1e6 s
    huge = [(1e300 + i * 1e290, v) for i, (_, v) in enumerate(good)]
    back = [*good[:20], (good[5][0], 0.0), *good[21:]]   # a row earlier than the one before it
    long_field = "t_s,angle_rad\n" + "".join(f"{t},{v}\n" for t, v in good[:20]) + "0.3," + "1" * 140_000 + "\n"   # past the CSV reader's 131,072
    open_quote = "t_s,angle_rad\n" + "".join(f"{t},{v}\n" for t, v in good[:20]) + '0.3,"0.1\n' + "0.4,0.2\n" * 30
    cases = {
        "bad_timestamp": (write_csv(tmp_path / "jump.csv", ["t_s", "angle_rad"], jump), ["jump", "bad timestamp"]),
        "times_near_1e300": (write_csv(tmp_path / "huge.csv", ["t_s", "angle_rad"], huge), ["data row 1", "beyond"]),
        "not_increasing": (write_csv(tmp_path / "back.csv", ["t_s", "angle_rad"], back), ["must increase"]),
    }
    for name, text, words in (("long_field", long_field, ["line 22", "CSV"]),
                              ("open_quote", open_quote, ["data row 21", "quote left open"])):
        (tmp_path / f"{name}.csv").write_text(text, encoding="utf-8")
        cases[name] = (str(tmp_path / f"{name}.csv"), words)
    return cases


@pytest.mark.parametrize("case", ["bad_timestamp", "times_near_1e300", "not_increasing", "long_field", "open_quote"])
def test_broken_time_columns_are_one_line_from_fit(tmp_path, capsys, case):
    """Issue 13 part 5: each is one line naming the file, exit 2, before any fit allocates."""
    from sim.cli import main
    path, words = _broken_logs(tmp_path)[case]
    out = tmp_path / "out"
    code = main(["fit", path, "--test", "free-swing", "--out", str(out)])
    err = [line for line in capsys.readouterr().err.splitlines() if line.strip()]
    assert code == 2 and len(err) == 1, err
    assert err[0].startswith(f"wheelbench: {path}") and "Traceback" not in err[0]
    for w in words:
        assert w in err[0], (w, err[0])
    assert not out.exists()


def test_a_log_with_gaps_is_still_read(tmp_path):
    """Gaps short of the bad-timestamp rule are data: a logger that paused for 50 samples."""
    rows = _swing_rows(200)
    rows = rows[:100] + [(t + 0.5, v) for t, v in rows[100:]]
    log = read_log(write_csv(tmp_path / "gap.csv", ["t_s", "angle_rad"], rows))
    assert len(log.t_s) == 200
    assert_allclose(log.t_s[-1], 1.99 + 0.5, rtol=1e-12)


def test_local_maxima_follow_their_definition_in_memory_proportional_to_the_samples():
    """The feature search's running maxima: the same indices as the definition (x[i] the first
    largest within +-h, at least min_rise above the lowest within +-2h, written out here one
    index at a time), and traced memory a small multiple of the input, not samples x window."""
    import tracemalloc

    from sim.fit.fitting import local_maxima
    rng = np.random.default_rng(3)
    for trial in range(300):
        n, h = int(rng.integers(1, 60)), int(rng.integers(1, 9))
        x = rng.integers(0, 4, n).astype(float) if trial % 2 else rng.normal(size=n)   # ties and no ties
        rise = float(rng.uniform(0.0, 1.5))
        expect = [i for i in range(n) if n >= 2 * h + 1
                  and x[i] == max(x[max(0, i - h):i + h + 1]) and all(x[max(0, i - h):i] < x[i])
                  and x[i] - min(x[max(0, i - 2 * h):i + 2 * h + 1]) >= rise]
        assert list(local_maxima(x, half_width=h, min_rise=rise)) == expect
    x = np.sin(np.linspace(0.0, 60.0 * np.pi, 50_000))      # 30 swings of 1,667 samples
    tracemalloc.start()
    local_maxima(x, half_width=500, min_rise=0.5)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert peak < 10 * x.nbytes, f"{peak / 2**20:.0f} MB for a {x.nbytes / 2**20:.1f} MB signal"


def test_reading_a_log_keeps_only_its_numbers(tmp_path):
    """Streamed reading: traced memory while reading stays near the arrays kept (8 bytes a value
    for the known columns), not the text, its lines and a list of rows (~40x more)."""
    import tracemalloc

    n = 200_000
    path = tmp_path / "long.csv"
    with open(path, "w", encoding="utf-8") as fh:
        fh.write("t_s,angle_rad,mode,notes\n")
        for i in range(n):
            fh.write(f"{i * 1e-4:.4f},{0.1 * math.sin(i * 1e-3):.6f},hold,a column we do not read\n")
    tracemalloc.start()
    log = read_log(path)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    kept = n * 2 * 8
    assert len(log.t_s) == n
    assert peak < 6 * kept, f"{peak / 2**20:.1f} MB peak for {kept / 2**20:.1f} MB of numbers"


def test_a_long_coast_down_fitted_to_bin_means_agrees_with_every_sample(monkeypatch):
    """Past FIT_SAMPLES the model is fitted to bin means (bounded memory). On a coast-down made
    by scipy's solve_ivp from I_w w' = -b w - T_c (tests/test_fitting.coast_truth), the
    binned fit finds the same friction within its uncertainty, with about the same uncertainty
    (the mean of k samples has 1/sqrt(k) of their noise; common practice, no source)."""
    import sim.fit.fitting
    from sim.fit.bench_tests import fit_log
    from sim.fit.logs import BenchLog
    from test_fitting import coast_truth

    rng = np.random.default_rng(11)
    t = np.linspace(0.0, 12.0, 60_000)
    w = coast_truth(t, w0=300.0, start_s=1.0) + rng.normal(0.0, 0.5, t.size)
    log = BenchLog(path="coast.csv", t_s=t, columns={"wheel_speed_rad_s": w},
                   source_names={"wheel_speed_rad_s": "wheel_speed_rad_s"})
    every = fit_log(log, "coast-down")
    monkeypatch.setattr(sim.fit.fitting, "FIT_SAMPLES", 10_000)
    binned = fit_log(log, "coast-down")
    assert binned.facts["fit_bin_samples"] == 6 and "fit_bin_samples" not in every.facts
    for key in ("viscous_decay_rate_1_s", "coulomb_deceleration_rad_s2", "start_speed_rad_s"):
        (v1, s1), (v2, s2) = every.values[key], binned.values[key]
        assert abs(v2 - v1) < 2.0 * s1, (key, v1, v2, s1)
        assert 0.8 < s2 / s1 < 1.25, (key, s1, s2)
    assert_allclose(binned.facts["residual_rms_rad_s"], 0.5, rtol=0.05)   # over every sample: the noise
