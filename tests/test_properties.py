"""Invariances that must hold for any data (hypothesis property tests)."""
import numpy as np
from hypothesis import HealthCheck, given, settings, strategies as st

import flawmix as fm

from conftest import simulate_campaign

SETTINGS = settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def campaign(seed):
    return simulate_campaign(np.random.default_rng(seed), n=30, unknown=0.2, survive_at=460)


@SETTINGS
@given(seed=st.integers(0, 10_000), factor=st.sampled_from([1e6, 1e-3, 145.0377]))
def test_change_of_unit_scales_strengths_and_nothing_else(seed, factor):
    frame = campaign(seed)
    a = fm.fit(frame, intervals="wald")
    b = fm.fit(frame.assign(strength=frame["strength"] * factor), intervals="wald")
    for p, q in zip(a.populations, b.populations):
        assert np.isclose(q.modulus, p.modulus, rtol=1e-7)
        assert np.isclose(q.characteristic_strength, p.characteristic_strength * factor, rtol=1e-7)
        np.testing.assert_allclose(q.strength_interval, np.array(p.strength_interval) * factor, rtol=1e-6)
        np.testing.assert_allclose(q.modulus_interval, p.modulus_interval, rtol=1e-6)
    # the density picks up the Jacobian of the unit change, nothing more
    assert np.isclose(b.log_likelihood, a.log_likelihood - a.n_failed * np.log(factor), rtol=1e-9, atol=1e-7)


@SETTINGS
@given(seed=st.integers(0, 10_000), order_seed=st.integers(0, 10_000))
def test_row_order_changes_nothing(seed, order_seed):
    frame = campaign(seed)
    shuffled = frame.sample(frac=1.0, random_state=order_seed)
    a = fm.fit(frame, intervals="none").to_dict()
    b = fm.fit(shuffled, intervals="none").to_dict()
    assert np.isclose(a["log_likelihood"], b["log_likelihood"], rtol=1e-10)
    for p, q in zip(a["populations"], b["populations"]):
        assert p["name"] == q["name"]
        assert np.isclose(p["modulus"], q["modulus"], rtol=1e-8)
        assert np.isclose(p["characteristic_strength"], q["characteristic_strength"], rtol=1e-8)


@SETTINGS
@given(seed=st.integers(0, 10_000))
def test_relabelling_populations_permutes_results(seed):
    frame = campaign(seed)
    renamed = frame.assign(origin=frame["origin"].replace({"pore": "zz-pore", "machining": "aa-machining"}))
    a = fm.fit(frame, intervals="none")
    b = fm.fit(renamed, intervals="none")
    assert [p.name for p in b.populations] == ["aa-machining", "zz-pore"]
    assert np.isclose(a.population("pore").modulus, b.population("zz-pore").modulus, rtol=1e-8)
    assert np.isclose(a.population("machining").characteristic_strength,
                      b.population("aa-machining").characteristic_strength, rtol=1e-8)
