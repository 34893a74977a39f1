"""The summary plot: angles continuous through +-180 deg, markers for pushes, the catch and a fall."""

from __future__ import annotations

import numpy as np

from sim.media.plots import summary_figure
from sim.run.trial import run_trial
from conftest import make_scenario


def _lines(ax):
    return {line.get_label(): line for line in ax.get_lines()}


def _texts(ax):
    return [t.get_text() for t in ax.texts]


def test_a_swing_up_plots_without_wrap_gaps_and_marks_the_catch_and_the_push():
    sc = make_scenario(strategy={"kind": "swing_and_catch"}, sensors={"rate": 500},
                       trial={"duration": 6.0, "start": {"angle": 3.1}, "pushes": [{"at": 5.0, "impulse": 0.002}]})
    result = run_trial(sc)
    assert result.outcome == "balanced" and result.caught_at_s is not None
    fig = summary_figure(result)
    top = fig.axes[0]
    true = _lines(top)["true"].get_ydata()
    meas = _lines(top)["measured"].get_ydata()
    # starts about half a turn from upright, ends upright, with no NaN breaks and no wrap jumps
    assert np.all(np.isfinite(true)) and np.all(np.isfinite(meas))
    # (the start, 3.1 rad from upright, reads 3.1 rad or a whole turn less, by which way the body went over)
    assert abs((true[0] - np.degrees(3.1) + 180.0) % 360.0 - 180.0) < 1.0 and abs(true[-1]) < 2.0
    assert np.max(np.abs(np.diff(true))) < 30.0 and np.max(np.abs(np.diff(meas))) < 30.0
    assert np.max(np.abs(meas - np.interp(_lines(top)["measured"].get_xdata(), _lines(top)["true"].get_xdata(),
                                          true))) < 5.0   # the two curves on one turn
    assert "caught" in _texts(top) and any(t.startswith("push") for t in _texts(top))
    # the legend sits outside the panel, where it cannot hide a curve
    box = top.get_legend().get_bbox_to_anchor().transformed(top.transAxes.inverted())
    assert box.x0 >= 1.0


def test_a_fall_is_marked():
    sc = make_scenario(strategy={"kind": "fixed_voltage", "volts": 0.0},
                       trial={"duration": 2.0, "start": {"angle": 0.3}})
    result = run_trial(sc)
    if result.fell_at_s is None:   # a bench law has no balance goal: no fall is recorded
        sc = make_scenario(strategy={"kind": "pid", "kp": 0.0, "ki": 0.0, "kd": 0.0},
                           trial={"duration": 2.0, "start": {"angle": 0.3}})
        result = run_trial(sc)
    assert result.fell_at_s is not None
    assert "fell" in _texts(summary_figure(result).axes[0])


def test_a_body_that_falls_and_whirls_keeps_its_start_angle_on_the_axis():
    # a balance law pushing on after the fall: the body goes round its pivot several times; the
    # panel keeps the start angle as given (not shifted by the whole turns of the end)
    sc = make_scenario(strategy={"kind": "fixed_voltage", "volts": 12.0},
                       trial={"duration": 3.0, "start": {"angle": "5 deg"}})
    result = run_trial(sc)
    true = _lines(summary_figure(result).axes[0])["true"].get_ydata()
    assert abs(true[-1] - true[0]) > 360.0, "the constructed body must go round at least once"
    assert abs(true[0] - 5.0) < 0.5
