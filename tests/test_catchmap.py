"""Catch maps: which start states the balance law catches."""

import csv
import math

import numpy as np

from sim.cli import main
from sim.model.scenario import validate_scenario
from sim.studies.catchmap import balance_only_raw, catch_map
from test_verdicts import fast_raw, write_scenario


def test_upright_at_rest_is_caught_and_a_hopeless_start_is_lost(tmp_path):
    scen = write_scenario(tmp_path / "s.yaml", fast_raw())
    out = tmp_path / "map"
    assert main(["catch-map", scen, "--grid", "3", "--angle-max", "25 deg", "--rate-max", "4 rad/s",
                 "--out", str(out), "--workers", "1"]) == 0
    with open(out / "catch_map.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert list(rows[0])[:3] == ["angle_rad", "rate_rad_s", "caught"]
    cells = {(round(float(r["angle_rad"]), 6), round(float(r["rate_rad_s"]), 6)): r for r in rows}
    assert len(cells) == 9
    a = round(math.radians(25), 6)
    assert cells[(0.0, 0.0)]["caught"] == "True"
    # 25 degrees out and still falling outward at 4 rad/s: past what the 12 V wheel can return.
    assert cells[(a, 4.0)]["caught"] == "False" and cells[(-a, -4.0)]["caught"] == "False"
    # The equations of motion are odd in (theta, tau) (references.md, reaction-wheel pendulum
    # dynamics: theta -> -theta, tau -> -tau maps a solution to a solution) and this fixture has
    # no sensor bias and no dry friction, so the map must be point-symmetric about the origin.
    for (angle, rate), r in cells.items():
        assert cells[(-angle if angle else 0.0, -rate if rate else 0.0)]["caught"] == r["caught"]
    assert float(cells[(0.0, 0.0)]["wheel_speed_margin"]) > 0.9
    # the picture shows the table: lost cells in the "not caught" grey, the centre cell in the
    # colour of its margin on the colour bar (viridis, 0..1); each cell is thousands of pixels
    import matplotlib

    from pictures import pixels_near
    png = out / "catch_map.png"
    assert pixels_near(png, "#e9e4dc") > 2000
    centre = matplotlib.colormaps["viridis"](float(cells[(0.0, 0.0)]["wheel_speed_margin"]))
    assert pixels_near(png, centre, tol=3 / 255) > 2000


def test_a_supervisor_is_mapped_by_its_balance_law():
    raw = fast_raw(strategy={"kind": "swing_and_catch", "balance": {"kind": "lqr"}, "release_angle": "25 deg"})
    sc = validate_scenario(raw, where="t.yaml")
    braw = balance_only_raw(raw, sc)
    assert braw["strategy"] == {"kind": "lqr", "release_angle": "25 deg"}
    result = catch_map(raw, "t.yaml", grid=1, workers=1)
    assert result["strategy"] == "lqr" and result["rows"][0]["caught"] is True
    np.testing.assert_allclose(result["angle_max_rad"], 0.95 * math.radians(25), rtol=1e-12)
