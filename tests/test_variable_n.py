"""Manning's n varying with discharge or depth, wired from the config through to the profile.

References: uniform flow by Manning's equation (Chow 1959, ch. 6), solved with scipy brentq in
tests/valleys.py. With n a function of discharge, an event's normal depth is Manning's normal depth
at n(Q). With n falling with depth, the normal depth must lie between the normal depths at the
table's extreme n values (Manning's Q is monotonic in 1/n).
"""
import numpy as np
import pytest
from valleys import make_valley, write_config

from geoflow.batch import run
from geoflow.config import load_config
from geoflow.errors import ConfigError


def depths(res, v):
    p = res.profile
    return (p["wse_m"] - v.bed_at(v.x0 + p["chainage_m"])).to_numpy()


def test_n_by_discharge_gives_manning_normal_depth_at_n_of_q(tmp_path):
    v = make_valley(tmp_path, length=600.0)
    extra = '[[events]]\nname = "big"\ndischarge = 50.0\n'
    cfg = write_config(tmp_path, v, discharge=20.0, n=0.03, extra=extra)
    text = cfg.read_text().replace("n = 0.03\n", "n = 0.03\nn_by_discharge = [[10.0, 0.04], [60.0, 0.02]]\n", 1)
    cfg.write_text(text)
    res = run(cfg)
    p = res.profile
    for name, q in (("design", 20.0), ("big", 50.0)):
        n_q = np.interp(q, [10.0, 60.0], [0.04, 0.02])
        yn = v.normal_depth(q, n_q)
        d = (p[p.event == name]["wse_m"] - v.bed_at(v.x0 + p[p.event == name]["chainage_m"])).to_numpy()
        assert np.all(np.abs(d / yn - 1) < 0.02), (name, yn, d)


def test_n_by_depth_bounded_by_its_extremes_and_constant_law_changes_nothing(tmp_path):
    v = make_valley(tmp_path, length=600.0)
    cfg = write_config(tmp_path, v, discharge=30.0, n=0.03)
    base = depths(run(cfg), v)
    cfg.write_text(cfg.read_text().replace("n = 0.03\n", "n = 0.03\nn_by_depth = [[0.0, 0.03], [5.0, 0.03]]\n", 1))
    np.testing.assert_allclose(depths(run(cfg), v), base, atol=1e-3)
    cfg.write_text(cfg.read_text().replace("[[0.0, 0.03], [5.0, 0.03]]", "[[0.5, 0.05], [3.0, 0.025]]"))
    d = depths(run(cfg), v)
    assert np.all(d < v.normal_depth(30.0, 0.05)) and np.all(d > v.normal_depth(30.0, 0.025))
    assert np.all(np.abs(d - base) > 0.01)   # the law is really applied


def test_bad_n_laws_are_config_errors(tmp_path):
    v = make_valley(tmp_path, length=300.0)
    cfg = write_config(tmp_path, v, discharge=30.0, n=0.03)
    cfg.write_text(cfg.read_text().replace("n = 0.03\n", "n = 0.03\nn_by_depth = [[2.0, 0.03], [1.0, 0.04]]\n", 1))
    with pytest.raises(ConfigError, match=r"\[roughness.classes.channel\] n_by_depth.*increasing"):
        load_config(cfg)
