"""A reach whose downstream boundary is the water level of the reach it flows into (junction).

Reference: in two identical parallel valleys, reach r1 runs at Manning normal depth for its own
discharge (Chow 1959, ch. 6; scipy brentq in tests/valleys.py). Reach r2 carries less flow and
ends against r1's level at the same chainage, so its last section must sit at r1's WSE there and
its profile must be an M1 backwater curve falling towards r2's own normal depth upstream
(Chow 1959, ch. 9: depth above normal and above critical on a mild slope).
"""
import numpy as np
from valleys import make_valley, write_config

from geoflow.batch import run
from geoflow.cli import main


def junction_config(tmp_path, target="r1"):
    v = make_valley(tmp_path, length=1500.0, half_width=60.0, n_reaches=2, bank_height=5.0)
    extra = f'[boundary.reaches.r2]\ndownstream = {{ type = "junction", reach = "{target}" }}\n'
    cfg = write_config(tmp_path, v, discharge=30.0, n=0.03, width=100.0, extra=extra)
    cfg.write_text(cfg.read_text().replace("discharge = 30.0", "discharge = { r1 = 60.0, r2 = 15.0 }"))
    return v, cfg


def test_junction_boundary_takes_receiving_reach_level(tmp_path):
    v, cfg = junction_config(tmp_path)
    res = run(cfg, workers=1)
    assert not res.failed
    p = res.profile
    r1, r2 = p[p.reach_id == "r1"], p[p.reach_id == "r2"]
    y1 = v.normal_depth(60.0, 0.03)
    assert np.all(np.abs((r1.wse_m - v.bed_at(v.x0 + r1.chainage_m)) / y1 - 1) < 0.02)
    assert abs(r2.wse_m.iloc[-1] - r1.wse_m.iloc[-1]) < 1e-3
    d2 = (r2.wse_m - v.bed_at(v.x0 + r2.chainage_m)).to_numpy()
    y2 = v.normal_depth(15.0, 0.03)
    assert d2[-1] > 1.2 * y2                      # backwater at the junction
    assert np.all(np.diff(d2) > 0)                # M1: depth grows downstream
    assert d2[0] < d2[-1] and d2[0] > y2 * 0.99   # tends to normal depth upstream


def test_junction_to_unknown_reach_is_a_config_error(tmp_path, capsys):
    v, cfg = junction_config(tmp_path, target="nowhere")
    assert main(["run", str(cfg), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "nowhere" in err and "junction" in err
