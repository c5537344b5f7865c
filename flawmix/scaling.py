"""Effective volume, area and edge length of test specimens and stressed bodies.

For a population of modulus m, the risk of rupture of a body is k(m)·(σ_ref/σ0)^m with
k = ∫ (σ/σ_ref)^m over the volume (volume flaws), the surface (surface flaws) or the edges
(edge flaws), σ_ref the largest tensile stress. Closed forms follow elastic beam and plate
theory (ASTM C1683; G. D. Quinn, J. Am. Ceram. Soc. 86 (2003)), re-derived; the element
route integrates a table exported from a stress analysis. Lengths in mm unless declared.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd
from scipy import special

from .errors import FlawmixError
from .units import length_factor, length_unit

# Multiaxial rules, spelled out; the trade's short forms stay accepted.
MULTIAXIAL_RULES = ("independent-action", "largest-principal")
RULE_ALIASES = {"pia": "independent-action", "principle-of-independent-action": "independent-action",
                "largest": "largest-principal", "largest-principal-stress": "largest-principal"}


def multiaxial_rule(name: str) -> str:
    """The spelled-out name of a multiaxial rule (``pia`` → ``independent-action``)."""
    key = str(name).strip().lower().replace("_", "-").replace(" ", "-")
    key = RULE_ALIASES.get(key, key)
    if key not in MULTIAXIAL_RULES:
        raise FlawmixError(f"unknown multiaxial rule '{name}'; use independent-action (principle of independent "
                           "action, also 'pia') or largest-principal (largest principal stress, also 'largest')")
    return key


@dataclass(frozen=True)
class EffectiveSize:
    """Effective volume, area and edge length at one modulus, and the stress they refer to."""

    modulus: float
    effective_volume: float | None
    effective_area: float | None
    effective_length: float | None
    unit: str = "mm"
    geometry: str = ""
    rule: str | None = None

    def for_kind(self, kind: str) -> float:
        """The measure a population of this flaw kind scales with."""
        value = {"volume": self.effective_volume, "surface": self.effective_area,
                 "edge": self.effective_length}.get(kind)
        if value is None:
            raise FlawmixError(f"geometry '{self.geometry}' has no effective "
                               f"{ {'volume': 'volume', 'surface': 'area', 'edge': 'length'}.get(kind, kind) }; "
                               "give the population another kind or the geometry that measure")
        return value

    def to_dict(self) -> dict:
        out = {"geometry": self.geometry, "modulus": self.modulus, "effective_volume": self.effective_volume,
               "effective_area": self.effective_area, "unit": self.unit}
        if self.effective_length is not None:
            out["effective_length"] = self.effective_length
        if self.rule:
            out["multiaxial_rule"] = self.rule
        return out


def _check_positive(**values):
    for name, v in values.items():
        if v is None or not (isinstance(v, (int, float)) and math.isfinite(v) and v > 0):
            raise FlawmixError(f"{name.replace('_', ' ')} must be a positive number (got {v!r})")


def _spans(outer_span, inner_span):
    _check_positive(outer_span=outer_span)
    inner = 0.0 if inner_span is None else float(inner_span)
    if inner < 0 or inner >= outer_span:
        raise FlawmixError(f"inner span {inner} must be at least 0 and less than the outer span {outer_span}")
    return float(outer_span), inner


# ---- closed forms ------------------------------------------------------------------------

def flexure_bar(modulus, width, depth, outer_span, inner_span=0.0, unit="mm") -> EffectiveSize:
    """Rectangular bar in three-point (inner_span = 0) or four-point flexure, chamfers ignored.

    V_E = b d (m Li + L) / [2 (m+1)²];  A_E = (m Li + L)/(m+1)² [b (m+1) + d] (tensile face
    plus the tensile halves of both sides);  L_E = 2 (m Li + L)/(m+1) (the two tensile edges).
    """
    _check_positive(modulus=modulus, width=width, depth=depth)
    L, Li = _spans(outer_span, inner_span)
    m, b, d = float(modulus), float(width), float(depth)
    length = (m * Li + L) / (m + 1)
    return EffectiveSize(m, b * d * length / (2 * (m + 1)), length / (m + 1) * (b * (m + 1) + d),
                         2 * length, length_unit(unit), "flexure-4pt" if Li > 0 else "flexure-3pt")


def flexure_rod(modulus, diameter, outer_span, inner_span=0.0, unit="mm") -> EffectiveSize:
    """Round rod in three- or four-point flexure.

    V_E = (m Li + L)/(m+1) · (πD²/4) · Γ((m+1)/2) / [√π (m+2) Γ(m/2+1)];
    A_E = (m Li + L)/(m+1) · (D/2) · √π Γ((m+1)/2) / Γ(m/2+1).
    """
    _check_positive(modulus=modulus, diameter=diameter)
    L, Li = _spans(outer_span, inner_span)
    m, D = float(modulus), float(diameter)
    length = (m * Li + L) / (m + 1)
    ratio = math.exp(special.gammaln((m + 1) / 2) - special.gammaln(m / 2 + 1))
    volume = length * (math.pi * D * D / 4) * ratio / (math.sqrt(math.pi) * (m + 2))
    area = length * (D / 2) * math.sqrt(math.pi) * ratio
    return EffectiveSize(m, volume, area, None, length_unit(unit), "rod-flexure-4pt" if Li > 0 else "rod-flexure-3pt")


def tension_bar(modulus, width, depth, gauge_length, unit="mm") -> EffectiveSize:
    """Uniform uniaxial tension over the gauge: the gauge volume, surface and four edges."""
    _check_positive(modulus=modulus, width=width, depth=depth, gauge_length=gauge_length)
    b, d, g = float(width), float(depth), float(gauge_length)
    return EffectiveSize(float(modulus), b * d * g, 2 * (b + d) * g, 4 * g, length_unit(unit), "tension-rect")


def tension_rod(modulus, diameter, gauge_length, unit="mm") -> EffectiveSize:
    _check_positive(modulus=modulus, diameter=diameter, gauge_length=gauge_length)
    D, g = float(diameter), float(gauge_length)
    return EffectiveSize(float(modulus), math.pi * D * D / 4 * g, math.pi * D * g, None, length_unit(unit),
                         "tension-round")


# ---- ring-on-ring discs ------------------------------------------------------------------

@dataclass(frozen=True)
class RingOnRing:
    """Stresses on the tensile face of a disc loaded ring-on-ring (thin-plate theory).

    Load ring radius a, support ring radius b, disc radius R, thickness h, Poisson's ratio ν.
    The axisymmetric plate equation is solved in three regions (inside the load ring, between
    the rings, the overhang outside the support ring) with continuity of slope and radial
    moment at a and b and a free edge at R; stresses are per unit load and returned relative
    to the equibiaxial stress inside the load ring.
    """

    load_radius: float
    support_radius: float
    disc_radius: float
    thickness: float
    poisson: float = 0.25
    _coef: tuple = field(default=(), repr=False, compare=False)

    def __post_init__(self):
        _check_positive(load_radius=self.load_radius, support_radius=self.support_radius,
                        disc_radius=self.disc_radius, thickness=self.thickness)
        if not self.load_radius < self.support_radius <= self.disc_radius:
            raise FlawmixError("ring-on-ring needs load radius < support radius <= disc radius")
        if not 0 <= self.poisson < 0.5:
            raise FlawmixError(f"Poisson's ratio {self.poisson} must lie in [0, 0.5)")
        object.__setattr__(self, "_coef", self._solve())

    def _solve(self):
        # slope φ(r) per unit P/(2πD): region 1: c1 r; region 2: ½(r ln r − r/2) + c2 r + c3/r;
        # region 3: c4 r + c5/r. Moment M_r ∝ φ' + ν φ/r.
        a, b, R, nu = self.load_radius, self.support_radius, self.disc_radius, self.poisson

        def phi2(r):  # particular part of region 2 and its derivative
            return 0.5 * (r * math.log(r) - r / 2), 0.5 * math.log(r) + 0.25

        def mr_part(r):
            p, dp = phi2(r)
            return dp + nu * p / r

        # unknowns x = [c1, c2, c3, c4, c5]
        A = np.zeros((5, 5))
        rhs = np.zeros(5)
        # slope continuity at a: c1 a = p(a) + c2 a + c3/a
        A[0] = [a, -a, -1 / a, 0, 0]; rhs[0] = phi2(a)[0]
        # moment continuity at a: c1(1+ν) = mr_part(a) + c2(1+ν) + c3(−1+ν)/a²
        A[1] = [1 + nu, -(1 + nu), -(nu - 1) / a**2, 0, 0]; rhs[1] = mr_part(a)
        # slope continuity at b
        A[2] = [0, b, 1 / b, -b, -1 / b]; rhs[2] = -phi2(b)[0]
        # moment continuity at b
        A[3] = [0, 1 + nu, (nu - 1) / b**2, -(1 + nu), -(nu - 1) / b**2]; rhs[3] = -mr_part(b)
        # free edge at R: c4(1+ν) + c5(ν−1)/R² = 0
        A[4] = [0, 0, 0, 1 + nu, (nu - 1) / R**2]
        return tuple(np.linalg.solve(A, rhs))

    def _moments(self, r):
        """(M_r, M_θ) up to the common factor D·P/(2πD) = P/(2π), sign: tension positive."""
        c1, c2, c3, c4, c5 = self._coef
        a, b, nu = self.load_radius, self.support_radius, self.poisson
        r = np.asarray(r, dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            ln = np.log(np.where(r > 0, r, 1.0))
            # region 2 slope and derivative
            p2 = 0.5 * (r * ln - r / 2) + c2 * r + c3 / np.where(r > 0, r, 1.0)
            dp2 = 0.5 * ln + 0.25 + c2 - c3 / np.where(r > 0, r, 1.0) ** 2
            p3 = c4 * r + c5 / np.where(r > 0, r, 1.0)
            dp3 = c4 - c5 / np.where(r > 0, r, 1.0) ** 2
        phi = np.where(r <= a, c1 * r, np.where(r <= b, p2, p3))
        dphi = np.where(r <= a, c1, np.where(r <= b, dp2, dp3))
        safe_r = np.where(r > 0, r, 1.0)
        over_r = np.where(r > 0, phi / safe_r, c1)
        Mr = dphi + nu * over_r
        Mt = over_r + nu * dphi
        return -Mr, -Mt   # the load side is compressive: flip so the tensile face is positive

    def relative_stresses(self, r):
        """(σ_r, σ_θ)/σ_max on the tensile face at radius r (σ_max: inside the load ring)."""
        Mr, Mt = self._moments(r)
        M0 = self._moments(np.array([0.0]))[0][0]
        return Mr / M0, Mt / M0

    def max_stress(self, load):
        """Equibiaxial stress inside the load ring for total load P (N) -> MPa with mm."""
        M0 = self._moments(np.array([0.0]))[0][0]
        return float(6 * load / (2 * math.pi) * M0 / self.thickness**2)

    def effective_size(self, modulus, rule="independent-action", unit="mm") -> EffectiveSize:
        """Effective area (tensile face) and volume (tensile half of the thickness).

        rule: ``independent-action`` (principle of independent action, ``pia``: Σ over positive
        principal stresses) or ``largest-principal`` (largest principal stress only, ``largest``)."""
        _check_positive(modulus=modulus)
        rule = multiaxial_rule(rule)
        m = float(modulus)
        a, b, R = self.load_radius, self.support_radius, self.disc_radius

        def integrand(r):
            sr, st = self.relative_stresses(np.array([r]))
            sr, st = max(float(sr[0]), 0.0), max(float(st[0]), 0.0)
            g = sr**m + st**m if rule == "independent-action" else max(sr, st) ** m
            return g * 2 * math.pi * r

        inner = (2.0 if rule == "independent-action" else 1.0) * math.pi * a * a
        from scipy import integrate   # on use: only this geometry integrates numerically

        ring, _ = integrate.quad(integrand, a, b, limit=200, epsabs=0, epsrel=1e-11)
        over, _ = integrate.quad(integrand, b, R, limit=200, epsabs=0, epsrel=1e-11) if R > b else (0.0, 0.0)
        area = inner + ring + over
        # stresses vary linearly through the thickness: ∫_0^{h/2} (2z/h)^m dz = h / (2(m+1))
        volume = area * self.thickness / (2 * (m + 1))
        return EffectiveSize(m, volume, area, None, length_unit(unit), "ring-on-ring", rule)


def ring_on_ring(modulus, load_radius, support_radius, disc_radius, thickness, poisson=0.25,
                 rule="independent-action", unit="mm") -> EffectiveSize:
    return RingOnRing(load_radius, support_radius, disc_radius, thickness, poisson).effective_size(modulus, rule, unit)


# ---- element tables ----------------------------------------------------------------------

@dataclass(frozen=True)
class ElementTable:
    """Elements from a stress analysis: size (volume or area) and principal stresses.

    size: (E,); stresses: (E, 3) principal stresses (missing ones as 0), any stress unit.
    """

    size: np.ndarray
    stresses: np.ndarray
    kind: str            # "volume" or "area"
    unit: str = "mm"
    source: str | None = None

    @property
    def reference_stress(self) -> float:
        return float(self.stresses.max())

    def effective(self, modulus: float, rule: str = "independent-action", reference_stress: float | None = None) -> float:
        """∫ g(σ)/σ_ref^m over the elements: g = Σ σ_i+^m (independent action) or max(σ_i)+^m (largest principal)."""
        rule = multiaxial_rule(rule)
        ref = reference_stress or self.reference_stress
        rel = np.clip(self.stresses / ref, 0.0, None)
        g = (rel ** modulus).sum(axis=1) if rule == "independent-action" else rel.max(axis=1) ** modulus
        return float(np.dot(self.size, g))

    def effective_size(self, modulus, rule="independent-action") -> EffectiveSize:
        rule = multiaxial_rule(rule)
        value = self.effective(modulus, rule)
        return EffectiveSize(float(modulus), value if self.kind == "volume" else None,
                             value if self.kind == "area" else None, None, self.unit, "elements", rule)


def read_elements(path_or_frame, unit: str = "mm") -> ElementTable:
    """Read an element table: columns ``volume`` or ``area``, ``stress_1`` [, ``stress_2``, ``stress_3``]."""
    from .specimens import normalise_label

    source = None
    if isinstance(path_or_frame, pd.DataFrame):
        frame = path_or_frame.copy()
    else:
        from pathlib import Path

        source = str(path_or_frame)
        if not Path(source).exists():
            raise FlawmixError(f"{source}: no such element table; check the path")
        try:
            frame = pd.read_csv(source)
        except Exception as exc:
            raise FlawmixError(f"{source}: not a readable CSV table ({exc}); save it as CSV") from None
    frame.columns = [normalise_label(c) for c in frame.columns]
    prefix = f"{source}: " if source else ""
    kinds = [c for c in ("volume", "area") if c in frame.columns]
    if len(kinds) != 1:
        raise FlawmixError(f"{prefix}an element table needs exactly one of the columns 'volume' or 'area' "
                           f"(found: {', '.join(frame.columns)})")
    if "stress_1" not in frame.columns:
        raise FlawmixError(f"{prefix}an element table needs principal stresses 'stress_1' (and optionally "
                           "'stress_2', 'stress_3')")
    cols = [c for c in ("stress_1", "stress_2", "stress_3") if c in frame.columns]
    for col in [kinds[0], *cols]:
        values = pd.to_numeric(frame[col], errors="coerce")
        bad = np.flatnonzero(~np.isfinite(values.to_numpy(dtype=float)))
        if bad.size:
            raise FlawmixError(f"{prefix}line {bad[0] + 2}, column '{col}': not a finite number; "
                               "fill in every element's value")
        frame[col] = values
    size = frame[kinds[0]].to_numpy(dtype=float)
    if np.any(size < 0):
        i = int(np.flatnonzero(size < 0)[0])
        raise FlawmixError(f"{prefix}line {i + 2}, column '{kinds[0]}': negative size; element sizes must be >= 0")
    stresses = np.zeros((len(frame), 3))
    for i, c in enumerate(cols):
        stresses[:, i] = frame[c].to_numpy(dtype=float)
    if stresses.max() <= 0:
        raise FlawmixError(f"{prefix}no element is in tension; the effective size is zero")
    return ElementTable(size, stresses, kinds[0], length_unit(unit), source)


# ---- one entry point ---------------------------------------------------------------------

GEOMETRIES: dict[str, tuple[Callable, tuple[str, ...]]] = {
    "flexure-3pt": (lambda m, **k: flexure_bar(m, k["width"], k["depth"], k["outer_span"], 0.0, k.get("unit", "mm")),
                    ("width", "depth", "outer_span")),
    "flexure-4pt": (lambda m, **k: flexure_bar(m, k["width"], k["depth"], k["outer_span"], k["inner_span"],
                                               k.get("unit", "mm")),
                    ("width", "depth", "outer_span", "inner_span")),
    "rod-flexure-3pt": (lambda m, **k: flexure_rod(m, k["diameter"], k["outer_span"], 0.0, k.get("unit", "mm")),
                        ("diameter", "outer_span")),
    "rod-flexure-4pt": (lambda m, **k: flexure_rod(m, k["diameter"], k["outer_span"], k["inner_span"],
                                                   k.get("unit", "mm")),
                        ("diameter", "outer_span", "inner_span")),
    "tension-rect": (lambda m, **k: tension_bar(m, k["width"], k["depth"], k["gauge_length"], k.get("unit", "mm")),
                     ("width", "depth", "gauge_length")),
    "tension-round": (lambda m, **k: tension_rod(m, k["diameter"], k["gauge_length"], k.get("unit", "mm")),
                      ("diameter", "gauge_length")),
    "ring-on-ring": (lambda m, **k: ring_on_ring(m, k["load_radius"], k["support_radius"], k["disc_radius"],
                                                 k["thickness"], k.get("poisson", 0.25), k.get("rule", "independent-action"),
                                                 k.get("unit", "mm")),
                     ("load_radius", "support_radius", "disc_radius", "thickness")),
}


def effective_size(geometry: str, modulus: float, **dimensions) -> EffectiveSize:
    """Effective sizes of a named geometry, e.g.
    ``effective_size("flexure-4pt", 10, width=4, depth=3, outer_span=40, inner_span=20)``."""
    if geometry == "elements":
        table = dimensions.get("table")
        if not isinstance(table, ElementTable):
            table = read_elements(table, dimensions.get("unit", "mm"))
        return table.effective_size(modulus, dimensions.get("rule", "independent-action"))
    if geometry not in GEOMETRIES:
        raise FlawmixError(f"unknown geometry '{geometry}'; use one of {', '.join([*GEOMETRIES, 'elements'])}")
    fn, needed = GEOMETRIES[geometry]
    missing = [n for n in needed if dimensions.get(n) is None]
    if missing:
        raise FlawmixError(f"geometry '{geometry}' needs {', '.join('--' + n.replace('_', '-') for n in missing)}")
    return fn(modulus, **dimensions)


def convert(size: EffectiveSize, unit: str) -> EffectiveSize:
    """The same effective sizes in another length unit."""
    f = length_factor(size.unit, unit)
    scale = lambda x, p: None if x is None else x * f**p
    return EffectiveSize(size.modulus, scale(size.effective_volume, 3), scale(size.effective_area, 2),
                         scale(size.effective_length, 1), length_unit(unit), size.geometry, size.rule)
