"""Effective sizes, size scaling and component prediction."""
import json
import math
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

import flawmix as fm
from flawmix.geometry import Geometry
from flawmix.predict import predict, what_if
from flawmix.scaling import ElementTable, RingOnRing, flexure_bar, flexure_rod, effective_size

# DOMAIN.md section 4 [pub: ASTM C1683; Quinn 2003 — re-derived and integrated, calc]
# bar 4 x 3 mm, spans 40/20 mm (4-point) and 40 mm (3-point)
BAR_TABLE = {5: (23.3333, 105.0000, 6.6667, 30.0000),
             10: (11.9008, 93.2231, 1.9835, 15.5372),
             20: (5.9864, 86.8027, 0.5442, 7.8912)}


@pytest.mark.parametrize("m", sorted(BAR_TABLE))
def test_bar_closed_forms_match_check_values(m):
    v4, a4, v3, a3 = BAR_TABLE[m]
    four = flexure_bar(m, 4, 3, 40, 20)
    three = flexure_bar(m, 4, 3, 40, 0)
    assert four.effective_volume == pytest.approx(v4, abs=1e-4)
    assert four.effective_area == pytest.approx(a4, abs=1e-4)
    assert three.effective_volume == pytest.approx(v3, abs=1e-4)
    assert three.effective_area == pytest.approx(a3, abs=1e-4)


def test_rod_closed_forms_match_check_values():
    # DOMAIN.md section 4 [calc]: D = 3, spans 20/40, m = 10
    rod = flexure_rod(10, 3, 40, 20)
    assert rod.effective_volume == pytest.approx(3.1628, abs=1e-4)
    assert rod.effective_area == pytest.approx(25.302, abs=1e-3)


def _beam_elements(m, b, d, L, Li, n_x=4000, n_y=400):
    """Numerical route: elements of the tensile half of a bar with the elastic beam stress
    field σ = σ_max · M(x)/M_max · y/(d/2), midpoint rule."""
    x = (np.arange(n_x) + 0.5) / n_x * L
    moment = np.where(np.abs(x - L / 2) <= Li / 2, 1.0, np.clip((L / 2 - np.abs(x - L / 2)) / ((L - Li) / 2), 0, 1))
    y = (np.arange(n_y) + 0.5) / n_y * (d / 2)
    dx, dy = L / n_x, d / 2 / n_y
    stress = (moment[:, None] * (y / (d / 2))[None, :]).ravel()
    volume = ElementTable(np.full(stress.size, b * dx * dy), np.column_stack([stress, 0 * stress, 0 * stress]), "volume")
    # tensile face (y = d/2) and the tensile halves of the two sides
    face = ElementTable(np.full(n_x, b * dx), np.column_stack([moment, 0 * moment, 0 * moment]), "area")
    sides = ElementTable(np.full(stress.size, 2 * dx * dy), np.column_stack([stress, 0 * stress, 0 * stress]), "area")
    return volume.effective(m, reference_stress=1.0), face.effective(m, reference_stress=1.0) + sides.effective(m, reference_stress=1.0)


@pytest.mark.parametrize("m, Li", [(5, 20), (10, 20), (20, 0), (10, 0)])
def test_closed_forms_agree_with_numerical_integration_of_the_beam_field(m, Li):
    v, a = _beam_elements(m, 4, 3, 40, Li)
    closed = flexure_bar(m, 4, 3, 40, Li)
    assert v == pytest.approx(closed.effective_volume, rel=2e-3)
    assert a == pytest.approx(closed.effective_area, rel=2e-3)


@pytest.mark.parametrize("R", [10.0, 12.5, 20.0])
def test_ring_on_ring_centre_stress_matches_the_standard_formula(R):
    # ASTM C1499 [mem via DOMAIN.md section 4]: σ = 3P/(2πh²)[(1+ν) ln(b/a) + (1−ν)(b²−a²)/(2R²)]
    a, b, h, nu, P = 5.0, 10.0, 2.0, 0.25, 1000.0
    disc = RingOnRing(a, b, R, h, nu)
    expected = 3 * P / (2 * math.pi * h * h) * ((1 + nu) * math.log(b / a) + (1 - nu) * (b * b - a * a) / (2 * R * R))
    assert disc.max_stress(P) == pytest.approx(expected, rel=1e-10)


def test_ring_on_ring_stresses_satisfy_plate_equilibrium_and_boundary_conditions():
    # Independent check of the plate solution: radial equilibrium
    # dM_r/dr + (M_r − M_θ)/r = −Q(r), Q = P/(2πr) between the rings and 0 elsewhere
    # (moments signed positive for tension on the face away from the load ring),
    # by finite differences; free edge M_r(R) = 0; σ_r continuous at both rings.
    a, b, R = 5.0, 10.0, 12.5
    disc = RingOnRing(a, b, R, 2.0, 0.25)
    h = 1e-5
    for r in (2.0, 7.0, 9.0, 11.0):
        mr = lambda x: disc._moments(np.array([x]))[0][0]
        mt = disc._moments(np.array([r]))[1][0]
        residual = (mr(r + h) - mr(r - h)) / (2 * h) + (mr(r) - mt) / r
        expected = -1.0 / r if a < r < b else 0.0     # moments are per unit P/(2π)
        assert residual == pytest.approx(expected, abs=1e-6)
    sr, _ = disc.relative_stresses(np.array([R, a - 1e-9, a + 1e-9, b - 1e-9, b + 1e-9]))
    assert abs(sr[0]) < 1e-12
    assert sr[1] == pytest.approx(sr[2], abs=1e-6) and sr[3] == pytest.approx(sr[4], abs=1e-6)


@pytest.mark.parametrize("rule", ["pia", "largest"])
def test_ring_on_ring_effective_area_two_routes(rule):
    # route 1: quadrature of the plate field; route 2: an element table of thin rings
    disc = RingOnRing(5.0, 10.0, 12.5, 2.0, 0.25)
    edges = np.linspace(0, 12.5, 25001)
    r = 0.5 * (edges[1:] + edges[:-1])
    sr, st = disc.relative_stresses(r)
    table = ElementTable(np.pi * (edges[1:] ** 2 - edges[:-1] ** 2), np.column_stack([sr, st, 0 * r]), "area")
    for m in (5.0, 10.0, 25.0):
        assert table.effective(m, rule, reference_stress=1.0) == pytest.approx(
            disc.effective_size(m, rule).effective_area, rel=1e-4)


def test_effective_size_unit_conversion_and_errors():
    mm = effective_size("flexure-4pt", 10, width=4, depth=3, outer_span=40, inner_span=20)
    m = effective_size("flexure-4pt", 10, width=0.004, depth=0.003, outer_span=0.04, inner_span=0.02, unit="m")
    assert m.effective_volume == pytest.approx(mm.effective_volume * 1e-9, rel=1e-12)
    assert m.effective_area == pytest.approx(mm.effective_area * 1e-6, rel=1e-12)
    with pytest.raises(fm.FlawmixError, match="needs --depth"):
        effective_size("flexure-4pt", 10, width=4)
    with pytest.raises(fm.FlawmixError, match="inner span"):
        effective_size("flexure-4pt", 10, width=4, depth=3, outer_span=40, inner_span=50)


def test_cli_size_json():
    proc = subprocess.run([sys.executable, "-m", "flawmix", "size", "flexure-4pt", "--width", "4", "--depth", "3",
                           "--outer-span", "40", "--inner-span", "20", "--modulus", "10", "--json"],
                          capture_output=True, text=True)
    d = json.loads(proc.stdout)
    assert d["effective_volume"] == pytest.approx(11.9008, abs=1e-4) and d["unit"] == "mm"
    assert d["effective_area"] == pytest.approx(93.2231, abs=1e-4) and "effective_length" in d


SMALL = {"type": "flexure-4pt", "width": 4, "depth": 3, "outer_span": 40, "inner_span": 20}
LARGE = {"type": "flexure-4pt", "width": 8, "depth": 6, "outer_span": 80, "inner_span": 40}
M_TRUE, S0_TRUE = np.array([6.0, 15.0]), np.array([700.0, 600.0])
KINDS = ["volume", "surface"]


def _bars(rng, geometry, n):
    g = Geometry.from_spec(geometry["name"], {k: v for k, v in geometry.items() if k != "name"})
    scale = S0_TRUE * np.exp(-np.array([g.log_size(k, m) for k, m in zip(KINDS, M_TRUE)]) / M_TRUE)
    draws = scale * rng.weibull(1.0, (n, 2)) ** (1 / M_TRUE)
    return pd.DataFrame({"strength": draws.min(1), "origin": np.where(draws.argmin(1) == 0, "pore", "grind"),
                         "geometry": geometry["name"]}), scale


def test_two_sizes_fitted_jointly_recover_material_scale_and_modulus():
    rng = np.random.default_rng(60)
    a, _ = _bars(rng, {"name": "B", **SMALL}, 150)
    b, _ = _bars(rng, {"name": "L", **LARGE}, 150)
    sp = fm.read_specimens(pd.concat([a, b]), {"pore": {"kind": "volume"}, "grind": {"kind": "surface"}})
    geoms = {"B": Geometry.from_spec("B", SMALL), "L": Geometry.from_spec("L", LARGE)}
    r = fm.fit(sp, geometries=geoms, confidence=0.99)
    for j, p in enumerate(r.populations):
        assert p.modulus_interval[0] < M_TRUE[j] < p.modulus_interval[1]
    sigma0 = np.array([r.extras["material_scale"][n] for n in ("pore", "grind")])
    np.testing.assert_allclose(sigma0, S0_TRUE, rtol=0.08)


def test_scaled_prediction_matches_direct_simulation_of_the_larger_part():
    rng = np.random.default_rng(61)
    small, _ = _bars(rng, {"name": "B", **SMALL}, 400)
    fit = fm.fit(fm.read_specimens(small, {"pore": {"kind": "volume"}, "grind": {"kind": "surface"}}),
                 intervals="none")
    coupon, part = Geometry.from_spec("B", SMALL), Geometry.from_spec("L", LARGE)
    pred = predict(fit, coupon, part, stresses=[250.0, 300.0])
    # direct simulation of 200 000 large bars from the true material
    big, _ = _bars(rng, {"name": "L", **LARGE}, 200_000)
    for s in (250.0, 300.0):
        direct = float(np.mean(big["strength"] < s))
        assert pred.probabilities.loc[s, "component"] == pytest.approx(direct, rel=0.15)


def test_prediction_is_invariant_to_units():
    rng = np.random.default_rng(62)
    small, _ = _bars(rng, {"name": "B", **SMALL}, 80)
    groups = {"pore": {"kind": "volume"}, "grind": {"kind": "surface"}}
    r_mpa = fm.fit(fm.read_specimens(small, groups), intervals="none")
    r_pa = fm.fit(fm.read_specimens(small.assign(strength=small["strength"] * 1e6), groups, unit="Pa"), intervals="none")
    in_m = {k: (v / 1000 if k != "type" else v) for k, v in SMALL.items()}
    part_mm = Geometry.from_spec("P", {"type": "sizes", "volume": 900.0, "area": 1500.0})
    part_m = Geometry.from_spec("P", {"type": "sizes", "volume": 900e-9, "area": 1500e-6}, unit="m")
    a = predict(r_mpa, Geometry.from_spec("B", SMALL), part_mm, stresses=[200.0])
    b = predict(r_pa, Geometry.from_spec("B", in_m, unit="m"), part_m, stresses=[200e6])
    assert b.probabilities.iloc[0]["component"] == pytest.approx(a.probabilities.iloc[0]["component"], rel=1e-6)
    np.testing.assert_allclose(b.component_strengths, a.component_strengths * 1e6, rtol=1e-6)
    # σ0 converts as stress · length^(d/m): MPa·mm^(3/m) -> Pa·m^(3/m)
    from flawmix.predict import material_scale
    s0_mpa = material_scale(r_mpa, Geometry.from_spec("B", SMALL))
    s0_pa = material_scale(r_pa, Geometry.from_spec("B", in_m, unit="m"))
    d = np.array([3, 2])
    np.testing.assert_allclose(s0_pa, s0_mpa * 1e6 * (1e-3) ** (d / r_mpa.moduli), rtol=1e-6)


def test_crossover_and_what_if():
    rng = np.random.default_rng(63)
    small, _ = _bars(rng, {"name": "B", **SMALL}, 200)
    r = fm.fit(fm.read_specimens(small, {"pore": {"kind": "volume"}, "grind": {"kind": "surface"}}), intervals="none")
    coupon = Geometry.from_spec("B", SMALL)
    pred = predict(r, coupon, coupon, stresses=[300.0])
    c = pred.specimen_crossovers[0]
    # at the crossover both populations carry the same cumulative risk
    m, s = r.moduli, r.characteristic_strengths
    assert (c["stress"] / s[0]) ** m[0] == pytest.approx((c["stress"] / s[1]) ** m[1], rel=1e-9)
    assert c["below"] == "pore" and c["above"] == "grind"
    table = what_if(r, coupon, None, {"pore": 0.0}, probabilities=[0.01])
    after = table.loc[("specimen", 0.01), "after"]
    # with pores removed only grinding remains: its own 1 % quantile
    assert after == pytest.approx(r.population("grind").ppf(0.01), rel=1e-9)
    half = what_if(r, coupon, None, {"grind": 0.5}, probabilities=[0.5])
    scaled = r.characteristic_strengths.copy()
    scaled[1] *= 2 ** (1 / r.moduli[1])
    from flawmix.distributions import model_ppf
    assert half.loc[("specimen", 0.5), "after"] == pytest.approx(model_ppf("concurrent", 0.5, r.moduli[None], scaled[None])[0], rel=1e-9)
