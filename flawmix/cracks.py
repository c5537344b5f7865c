"""Shape factors Y of the crack models a fracture origin is idealised as, in K = Y·σ·√a:
embedded elliptical (penny) cracks, semi-elliptical surface cracks and quarter-elliptical
corner cracks (Newman–Raju), or a plain constant Y. Pure functions on numpy arrays.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import optimize as _sopt
from scipy import special as _special

from .errors import FlawmixError

CRACK_KINDS = ("embedded", "surface", "corner", "constant")
CRACK_NAMES = {"penny": "embedded", "embedded": "embedded", "circular": "embedded", "embedded-elliptical": "embedded",
               "surface": "surface", "semi-elliptical": "surface", "semicircular": "surface",
               "corner": "corner", "quarter-elliptical": "corner"}
LOADINGS = ("tension", "bending")


def embedded_factor(a_over_c):
    """Y at the end of the minor axis of an embedded elliptical crack in an infinite body under
    remote tension (the largest K on its front): √π / E(k), k² = 1 − (a/c)², a ≤ c; a/c = 1,
    the penny crack, gives 2/√π. For a/c > 1 the roles swap (a is then the major semi-axis)."""
    r = np.asarray(a_over_c, dtype=float)
    minor_over_major = np.where(r <= 1, r, 1 / r)
    e = _special.ellipe(1.0 - minor_over_major**2)
    # K = σ √(π·minor) / E: with a the minor axis Y = √π/E; with a the major one √(minor/a) too
    return np.sqrt(np.pi) / e * np.where(r <= 1, 1.0, np.sqrt(minor_over_major))


def _surface_parts(ac, at, phi, cb):
    """Newman–Raju (1981) boundary-correction F and shape term Q of a semi-elliptical surface
    crack in a plate of thickness t and half-width b under tension."""
    s, c = np.sin(phi), np.cos(phi)
    small = ac <= 1
    ca = 1 / ac
    M1 = np.where(small, 1.13 - 0.09 * ac, np.sqrt(ca) * (1 + 0.04 * ca))
    M2 = np.where(small, -0.54 + 0.89 / (0.2 + ac), 0.2 * ca**4)
    M3 = np.where(small, 0.5 - 1 / (0.65 + ac) + 14 * np.clip(1 - ac, 0, None)**24, -0.11 * ca**4)
    g = np.where(small, 1 + (0.1 + 0.35 * at**2) * (1 - s)**2, 1 + (0.1 + 0.35 * ca * at**2) * (1 - s)**2)
    f_phi = np.where(small, (ac**2 * c**2 + s**2)**0.25, (ca**2 * s**2 + c**2)**0.25)
    f_w = np.sqrt(1 / np.cos(np.pi * cb / 2 * np.sqrt(at)))
    Q = np.where(small, 1 + 1.464 * ac**1.65, 1 + 1.464 * ca**1.65)
    return (M1 + M2 * at**2 + M3 * at**4) * g * f_phi * f_w, Q


def _bending_multiplier(ac, at, phi):
    """Newman–Raju bending multiplier H: K_bending = H · (tension formula with σ_b)."""
    small = ac <= 1
    ca = 1 / ac
    p = np.where(small, 0.2 + ac + 0.6 * at, 0.2 + ca + 0.6 * at)
    H1 = np.where(small, 1 - 0.34 * at - 0.11 * ac * at,
                  1 - (0.04 + 0.41 * ca) * at + (0.55 - 1.93 * ca**0.75 + 1.38 * ca**1.5) * at**2)
    G1 = np.where(small, -1.22 - 0.12 * ac, -2.11 + 0.77 * ca)
    G2 = np.where(small, 0.55 - 1.05 * ac**0.75 + 0.47 * ac**1.5, 0.55 - 0.72 * ca**0.75 + 0.14 * ca**1.5)
    H2 = 1 + G1 * at + G2 * at**2
    return H1 + (H2 - H1) * np.sin(phi)**p


def surface_factor(a_over_c, a_over_t=0.0, phi=np.pi / 2, loading="tension", c_over_b=0.0):
    """Y of a semi-elliptical surface crack at parametric angle φ (π/2 the deepest point, 0
    where the front meets the surface): Y = H·F·√(π/Q) (H = 1 in tension)."""
    ac, at = np.asarray(a_over_c, dtype=float), np.asarray(a_over_t, dtype=float)
    F, Q = _surface_parts(ac, at, phi, np.asarray(c_over_b, dtype=float))
    H = _bending_multiplier(ac, at, phi) if loading == "bending" else 1.0
    return H * F * np.sqrt(np.pi / Q)


def corner_factor(a_over_c, a_over_t=0.0, phi=np.pi / 2, c_over_b=0.0):
    """Y of a quarter-elliptical corner crack in tension (Newman–Raju), a ≤ c form; φ = π/2 the
    point on the face where a is measured, 0 the point on the other face."""
    ac, at = np.asarray(a_over_c, dtype=float), np.asarray(a_over_t, dtype=float)
    if np.any(ac > 1):
        raise FlawmixError("corner cracks are modelled for a/c ≤ 1; measure a along the shorter leg")
    s, c = np.sin(phi), np.cos(phi)
    M1 = 1.08 - 0.03 * ac
    M2 = -0.44 + 1.06 / (0.3 + ac)
    M3 = -0.5 + 0.25 * ac + 14.8 * (1 - ac)**15
    g1 = 1 + (0.08 + 0.4 * at**2) * (1 - s)**3
    g2 = 1 + (0.08 + 0.15 * at**2) * (1 - c)**3
    f_phi = (ac**2 * c**2 + s**2)**0.25
    lam = np.asarray(c_over_b, dtype=float) * np.sqrt(at)
    f_w = 1 - 0.2 * lam + 9.4 * lam**2 - 19.4 * lam**3 + 27.1 * lam**4
    Q = 1 + 1.464 * ac**1.65
    return (M1 + M2 * at**2 + M3 * at**4) * g1 * g2 * f_phi * f_w * np.sqrt(np.pi / Q)


@dataclass(frozen=True)
class CrackModel:
    """How a population's origins are idealised. ``aspect`` a/c when a specimen has no
    ``flaw_width``; ``thickness`` t and ``half_width`` b (mm) of the section for a/t and c/b
    (None: a large body); ``shape_factor``: the constant Y of kind ``constant``."""

    kind: str = "embedded"
    loading: str = "tension"
    aspect: float = 1.0
    thickness: float | None = None
    half_width: float | None = None
    shape_factor: float | None = None

    def __post_init__(self):
        if self.kind not in CRACK_KINDS:
            raise FlawmixError(f"unknown crack model '{self.kind}'; use penny (embedded), semi-elliptical (surface), "
                               "corner, or give shape_factor")
        if self.loading not in LOADINGS:
            raise FlawmixError(f"unknown loading '{self.loading}'; use tension or bending")
        if self.kind == "corner" and self.loading == "bending":
            raise FlawmixError("corner cracks in bending are not modelled; use loading = \"tension\" or a shape_factor")

    @property
    def describe(self) -> str:
        if self.kind == "constant":
            return f"constant Y = {self.shape_factor:g}"
        name = {"embedded": "embedded elliptical (penny) crack", "surface": "semi-elliptical surface crack",
                "corner": "quarter-elliptical corner crack"}[self.kind]
        return name + ("" if self.kind == "embedded" else f", {self.loading}")

    def factor(self, depth_mm, width_mm=None) -> tuple[np.ndarray, np.ndarray]:
        """(Y, point) for flaws of depth a and full width 2c (surface; c for corner; 2c for
        embedded) in mm; point says where K is largest: ``deepest``, ``surface`` or ``front``.
        Y is the larger of the two points for surface and corner cracks."""
        a = np.asarray(depth_mm, dtype=float)
        aspect = np.full(a.shape, self.aspect)
        if width_mm is not None:
            w = np.asarray(width_mm, dtype=float)
            half = w if self.kind == "corner" else w / 2
            aspect = np.where(np.isfinite(w) & (w > 0), a / np.where(half > 0, half, 1.0), aspect)
        if self.kind == "constant":
            return np.full(a.shape, float(self.shape_factor)), np.full(a.shape, "given", dtype=object)
        if self.kind == "embedded":
            return embedded_factor(aspect), np.full(a.shape, "front", dtype=object)
        at = a / self.thickness if self.thickness else np.zeros(a.shape)
        c = a / aspect
        cb = c / self.half_width if self.half_width else np.zeros(a.shape)
        # range of the Newman–Raju fits: 0 < a/c ≤ 2 (corner: ≤ 1), a/t < 0.8 (and < 1.25(a/c + 0.6)
        # for shallow cracks), c/b < 0.5; NaN outside
        top = 1.0 if self.kind == "corner" else 2.0
        inside = (at < np.minimum(0.8, 1.25 * (aspect + 0.6))) & (cb < 0.5) & (aspect > 0) & (aspect <= top)
        at, cb, aspect = np.where(inside, at, 0.0), np.where(inside, cb, 0.0), np.where(inside, aspect, 1.0)
        if self.kind == "surface":
            deep = surface_factor(aspect, at, np.pi / 2, self.loading, cb)
            edge = surface_factor(aspect, at, 0.0, self.loading, cb)
        else:
            deep = corner_factor(aspect, at, np.pi / 2, cb)
            edge = corner_factor(aspect, at, 0.0, cb)
        point = np.where(deep >= edge, "deepest", "surface").astype(object)
        point[~inside] = "outside the model's range"
        return np.where(inside, np.maximum(deep, edge), np.nan), point

    def critical_size(self, toughness, stress_mpa, aspect=None) -> float:
        """Depth a (mm) at which Y(a)·σ·√a reaches K_Ic (MPa·√m) at stress σ (MPa), for flaws of
        shape a/c = ``aspect`` (default the model's)."""
        ratio = self.aspect if aspect is None else float(aspect)
        model = CrackModel(self.kind, self.loading, ratio, self.thickness, self.half_width, self.shape_factor)
        k_at = lambda a_mm: float(model.factor(np.array([a_mm]))[0][0]) * stress_mpa * np.sqrt(a_mm * 1e-3)
        y0 = float(model.factor(np.array([1e-9]))[0][0])
        guess = (toughness / (y0 * stress_mpa))**2 * 1e3
        if model.kind in ("embedded", "constant") or not model.thickness:
            return guess
        top = 0.8 * model.thickness * (1 - 1e-9)
        if model.half_width:
            top = min(top, 0.5 * model.half_width * ratio * (1 - 1e-9))
        if k_at(top) < toughness:
            return float("inf")            # no flaw that fits in the section is critical
        return float(_sopt.brentq(lambda a: k_at(a) - toughness, 1e-12, top, xtol=1e-14, rtol=1e-13))
