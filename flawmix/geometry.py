"""Named test or component geometries and their effective sizes as smooth functions of m.

A :class:`Geometry` answers "effective volume/area/length at modulus m" for any m, using the
closed forms or element tables of :mod:`flawmix.scaling`, interpolated in ln m so that
posterior and bootstrap draws can be scaled thousands at a time.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from .errors import FlawmixError
from .scaling import GEOMETRIES, effective_size, read_elements

KIND_MEASURE = {"volume": "effective_volume", "surface": "effective_area", "edge": "effective_length"}
MEASURE_WORD = {"volume": "volume", "surface": "area", "edge": "edge length"}
# ln m where effective sizes are tabulated: dense over the moduli of real materials, sparse
# tails for the draws a posterior or bootstrap of a poorly determined population may visit
_GRID = np.concatenate([np.linspace(np.log(0.05), np.log(0.5), 10, endpoint=False),
                        np.linspace(np.log(0.5), np.log(300.0), 160),
                        np.linspace(np.log(300.0), np.log(1000.0), 7)[1:]])


@dataclass(frozen=True)
class Geometry:
    """Effective sizes of one body for each flaw kind, for any modulus (mm-based units)."""

    name: str
    spec: dict = field(default_factory=dict)
    unit: str = "mm"
    _curves: dict = field(default_factory=dict, repr=False, compare=False)

    @classmethod
    def from_spec(cls, name: str, spec: Mapping[str, Any], base_dir: Path | None = None, unit: str = "mm") -> "Geometry":
        """Build from a study-file table, e.g. ``{"type": "flexure-4pt", "width": 4, ...}``,
        ``{"type": "elements", "volume_table": "v.csv", "area_table": "a.csv", "rule": "independent-action"}`` or
        ``{"type": "sizes", "volume": 120.0, "area": 800.0}`` (fixed sizes, independent of m)."""
        spec = dict(spec)
        kind = spec.pop("type", None)
        if kind is None:
            raise FlawmixError(f"geometry '{name}': give its 'type' ({', '.join([*GEOMETRIES, 'elements', 'sizes'])})")
        dims = {k.replace("-", "_"): v for k, v in spec.items()}
        curves: dict[str, Any] = {}
        if kind == "sizes":
            for k, key in (("volume", "volume"), ("surface", "area"), ("edge", "length")):
                if key in dims:
                    value = float(dims[key])
                    if not value > 0:
                        raise FlawmixError(f"geometry '{name}': {key} must be positive")
                    curves[k] = value
        elif kind == "elements":
            from scipy.interpolate import CubicSpline   # on use: it imports scipy.optimize (~0.3 s)

            rule = dims.get("rule", "independent-action")
            for k, key in (("volume", "volume_table"), ("surface", "area_table")):
                if key in dims:
                    path = Path(dims[key])
                    if base_dir is not None and not path.is_absolute():
                        path = base_dir / path
                    table = read_elements(path, unit)
                    values = np.array([table.effective(np.exp(u), rule) for u in _GRID])
                    curves[k] = CubicSpline(_GRID, np.log(values))
            if not curves:
                raise FlawmixError(f"geometry '{name}': an element geometry needs volume_table and/or area_table")
        elif kind in GEOMETRIES:
            from scipy.interpolate import CubicSpline

            try:
                sizes = [effective_size(kind, float(np.exp(u)), unit=unit, **dims) for u in _GRID]
            except TypeError as exc:
                raise FlawmixError(f"geometry '{name}': {exc}") from None
            for k, attr in KIND_MEASURE.items():
                values = [getattr(s, attr) for s in sizes]
                if all(v is not None for v in values):
                    curves[k] = CubicSpline(_GRID, np.log(values))
        else:
            raise FlawmixError(f"geometry '{name}': unknown type '{kind}'; use one of "
                               f"{', '.join([*GEOMETRIES, 'elements', 'sizes'])}")
        return cls(name, {"type": kind, **spec}, unit, curves)

    def has(self, kind: str) -> bool:
        return kind in self._curves

    def log_size(self, kind: str, modulus) -> np.ndarray:
        """ln of the effective size for flaw kind ``kind`` at modulus m (array-friendly)."""
        if kind == "unspecified":
            raise FlawmixError("a population of kind 'unspecified' cannot be scaled: say whether its flaws are "
                               "volume, surface or edge flaws (kind in the study file or --group NAME:KIND=...)")
        curve = self._curves.get(kind)
        if curve is None:
            raise FlawmixError(f"geometry '{self.name}' has no effective {MEASURE_WORD.get(kind, kind)}; "
                               f"describe it (for element tables: add a {'volume' if kind == 'volume' else 'area'}_table)")
        m = np.asarray(modulus, dtype=float)
        if isinstance(curve, float):
            return np.full(m.shape, np.log(curve))
        u = np.log(m)
        if np.any(u < _GRID[0]) or np.any(u > _GRID[-1]):
            raise FlawmixError(f"a modulus of {m.min():.3g} to {m.max():.3g} lies outside 0.05 to 1000, where effective sizes are tabulated: the population is too poorly determined to scale; test more specimens or group its origins with another population")
        return curve(u)

    def size(self, kind: str, modulus) -> np.ndarray:
        return np.exp(self.log_size(kind, modulus))


def population_log_sizes(geometry: Geometry, kinds, moduli) -> np.ndarray:
    """(..., k) ln effective size of each population (by its kind) at its modulus."""
    m = np.asarray(moduli, dtype=float)
    return np.stack([geometry.log_size(kind, m[..., j]) for j, kind in enumerate(kinds)], axis=-1)
