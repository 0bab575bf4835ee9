"""Design flows of pressure mains: continuous, Clément's first formula, peaking."""

import numpy as np
import pytest
from scipy.stats import norm

from mainspan.errors import InputError
from mainspan.hydraulics import DesignSettings, design_network
from mainspan.graph.network import accumulate, clement_flow_lps, rooted_network


def _clement_by_hand(q, r, u):
    # Clément's first formula (R. Clément, La Houille Blanche 1966, from memory), capped at all hydrants open
    q, r = np.asarray(q, float), np.asarray(r, float)
    return min(np.sum(r * q) + u * np.sqrt(np.sum(r * (1 - r) * q * q)), q.sum())


def test_quality_of_operation_quantile_against_scipy():
    # U is the standard normal quantile of the quality of operation: scipy.stats.norm.ppf(0.95) = 1.6449
    from statistics import NormalDist
    for p in (0.9, 0.95, 0.99):
        assert NormalDist().inv_cdf(p) == pytest.approx(norm.ppf(p), abs=1e-9)
    assert norm.ppf(0.95) == pytest.approx(1.645, abs=5e-4)


def test_clement_on_random_trees_against_subtree_sums():
    rng = np.random.default_rng(7)
    for n in (2, 5, 40):
        parent = np.array([rng.integers(0, i) for i in range(1, n)])
        net = rooted_network(n, parent, np.arange(1, n), roots=[0])
        q = rng.uniform(5, 20, n)
        q[0] = 0.0
        r = rng.uniform(0.1, 0.9, n)
        u = norm.ppf(0.95)
        got, src = clement_flow_lps(net, q, r, quality_u=u)
        # by hand, per link: the hydrants of the child's subtree, found by walking parents
        par = np.full(n, -1)
        par[1:] = parent
        for k, child in enumerate(np.arange(1, n)):
            members = [v for v in range(n) if _is_below(v, child, par)]
            assert got[k] == pytest.approx(_clement_by_hand(q[members], r[members], u))
        assert src[0] == pytest.approx(_clement_by_hand(q, r, u))


def _is_below(v, top, par):
    while v >= 0:
        if v == top:
            return True
        v = par[v]
    return False


def test_clement_worked_value():
    # 20 hydrants of 10 L/s, r = 1/3, U = 1.645: 66.67 + 1.645 * sqrt(20 * 2/9 * 100) = 101.35 L/s (by hand)
    net = rooted_network(21, np.zeros(20, np.int64), np.arange(1, 21), roots=[0])
    q = np.r_[0.0, np.full(20, 10.0)]
    _, src = clement_flow_lps(net, q, 1 / 3, quality_u=1.645)
    assert src[0] == pytest.approx(200 / 3 + 1.645 * np.sqrt(20 * 2 / 9 * 100), rel=1e-12)
    assert src[0] == pytest.approx(101.35, abs=0.01)


def _design(settings):
    n = 6
    return design_network("pressure", xy=np.c_[np.arange(n) * 100.0, np.zeros(n)], elevation_m=np.full(n, 10.0),
                          demand_lps=np.r_[0.0, np.full(n - 1, 10.0)], node_id=[f"n{i}" for i in range(n)],
                          from_node=np.arange(n - 1), to_node=np.arange(1, n), length_m=np.full(n - 1, 100.0),
                          surface_length_m=np.full(n - 1, 100.0), roots=[0], settings=settings)


def test_design_key_chooses_the_demand_model():
    cont = _design(DesignSettings())
    np.testing.assert_allclose(cont.link_fields["design_flow_lps"], [50, 40, 30, 20, 10])
    clem = _design(DesignSettings(demand_model="clement", hydrant_hours_per_day=6, network_hours_per_day=18))
    u = norm.ppf(0.95)
    want = [_clement_by_hand(np.full(m, 10.0), np.full(m, 1 / 3), u) for m in (5, 4, 3, 2, 1)]
    np.testing.assert_allclose(clem.link_fields["design_flow_lps"], want)
    assert clem.summary["pump"]["flow_lps"] == pytest.approx(want[0])
    assert any("Clément" in note for note in clem.summary["notes"])
    given = _design(DesignSettings(demand_model="clement", operating_probability=0.5, quality_of_operation=0.99))
    assert given.link_fields["design_flow_lps"][0] == pytest.approx(
        _clement_by_hand(np.full(5, 10.0), np.full(5, 0.5), norm.ppf(0.99)))
    peak = _design(DesignSettings(demand_model="peaking", peaking_factor=2.0))
    np.testing.assert_allclose(peak.link_fields["design_flow_lps"], [100, 80, 60, 40, 20])
    with pytest.raises(InputError, match="peaking_factor"):
        DesignSettings(demand_model="peaking")
    with pytest.raises(InputError, match="demand_model"):
        DesignSettings(demand_model="random")
    with pytest.raises(InputError, match="hydrant_hours_per_day"):
        DesignSettings(hydrant_hours_per_day=20, network_hours_per_day=18)
