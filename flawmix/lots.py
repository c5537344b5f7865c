"""Lots compared population by population: did a process change move one flaw population?
The lot model ties lot-specific copies of every population (copy (l, j) is carried only by lot
l's specimens), so the one likelihood (flawmix/likelihood.py) serves every hypothesis.
"""
from __future__ import annotations

import math
import re
import textwrap
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np

from . import formatting as fmt
from . import likelihood as lik
from .errors import FlawmixError
from .evidence import evidence_words, rejects

LOT_COLUMN = "lot"
DEFAULT_PROBABILITY = 0.01    # the failure probability at which strength changes are also stated


# ---- the specimens of every lot ----------------------------------------------------------

@dataclass(frozen=True)
class Lots:
    """Specimens of several lots on one set of populations and one stress unit.

    specimens: every specimen of every lot; lot: (N,) index into ``names`` (the first lot is
    the baseline every change is measured from)."""

    specimens: Any
    lot: np.ndarray
    names: tuple[str, ...]

    @property
    def n_lots(self) -> int:
        return len(self.names)

    def subset(self, index: int):
        """The specimens of one lot, as an ordinary :class:`Specimens`."""
        from dataclasses import replace

        sp = self.specimens
        mine = self.lot == index
        pick = lambda a: None if a is None else np.asarray(a)[mine]
        return replace(sp, strength=sp.strength[mine], failed=sp.failed[mine], candidates=sp.candidates[mine],
                       ids=pick(sp.ids), origin=pick(sp.origin), geometry=pick(sp.geometry),
                       unidentified=pick(sp.unidentified), uncertain=pick(sp.uncertain),
                       table=None if sp.table is None else sp.table[mine], origin_map=(), accounting=None,
                       source=f"{sp.source or 'specimens'} (lot '{self.names[index]}')")

    def in_unit(self, unit: str) -> "Lots":
        return Lots(self.specimens.in_unit(unit), self.lot, self.names)


def _lot_column(specimens) -> np.ndarray | None:
    """The ``lot`` column of a specimen table as text (None when the table has none)."""
    from .vocabulary import normalise_label

    table = specimens.table
    if table is None:
        return None
    columns = [c for c in table.columns if normalise_label(str(c)) == LOT_COLUMN]
    if not columns:
        return None
    values = table[columns[0]].to_numpy(dtype=object)
    text = np.array(["" if v is None or v != v else str(v).strip() for v in values], dtype=object)
    empty = np.flatnonzero(text == "")
    if empty.size:
        sid = specimens.ids[empty[0]] if specimens.ids is not None else str(empty[0] + 1)
        raise FlawmixError(f"{specimens.source or 'specimen table'}, specimen '{sid}', column '{columns[0]}': "
                           "empty lot; name the lot of every specimen")
    return text


def _order(found: Sequence[str], wanted: Sequence[str] | None, where: str) -> list[str]:
    found = list(dict.fromkeys(found))
    if wanted is None:
        return found
    wanted = [str(w) for w in wanted]
    missing = [w for w in found if w not in wanted]
    if missing:
        raise FlawmixError(f"{where}: lot '{missing[0]}' is in the table but not in the study's lots "
                           f"({', '.join(wanted)}); add it there or correct the lot column")
    return [w for w in wanted if w in found]


def read_lots(sources, populations=None, unit: str | None = None, *, lots: Sequence[str] | None = None,
              geometries: Mapping[str, str] | None = None, **read_options) -> Lots:
    """Specimens of several lots.

    sources: one table (path, DataFrame or :class:`Specimens`) with a ``lot`` column, or a
    list of tables (each one lot, named after its file), or a mapping lot name -> table.
    lots: the order of the lot names (the first is the baseline; default order of appearance).
    geometries: lot name -> geometry name, for tables without a ``geometry`` column.
    Other options go to :func:`flawmix.read_specimens`.
    """
    from .specimens import Specimens, read_specimens

    read = lambda s, pops: s if isinstance(s, Specimens) else read_specimens(s, pops, unit, **read_options)
    if isinstance(sources, Mapping) or (isinstance(sources, (list, tuple)) and len(sources) > 1):
        return _combine(sources, populations, read, geometries)
    single = sources[0] if isinstance(sources, (list, tuple)) else sources
    sp = read(single, populations)
    text = _lot_column(sp)
    if text is None:
        raise FlawmixError(f"{sp.source or 'specimen table'}: no '{LOT_COLUMN}' column; add one naming each "
                           "specimen's lot, or give one table per lot")
    names = _order(text, lots, sp.source or "specimen table")
    keep = np.isin(text, names)
    index = np.array([names.index(t) if t in names else -1 for t in text])
    sp = _with_geometry(sp, index, names, geometries)
    if len(names) < 2:
        raise FlawmixError(f"{sp.source or 'specimen table'}, column '{LOT_COLUMN}': only one lot "
                           f"('{names[0]}'); comparing lots needs at least two")
    result = Lots(sp, index, tuple(names))
    return result if keep.all() else _drop_unlisted(result, keep)


def _drop_unlisted(lots: Lots, keep: np.ndarray) -> Lots:
    from dataclasses import replace

    sp = lots.specimens
    pick = lambda a: None if a is None else np.asarray(a)[keep]
    sp = replace(sp, strength=sp.strength[keep], failed=sp.failed[keep], candidates=sp.candidates[keep],
                 ids=pick(sp.ids), origin=pick(sp.origin), geometry=pick(sp.geometry),
                 unidentified=pick(sp.unidentified), uncertain=pick(sp.uncertain),
                 table=None if sp.table is None else sp.table[keep])
    return Lots(sp, lots.lot[keep], lots.names)


def _with_geometry(sp, index, names, geometries):
    """Give every specimen its lot's geometry when the table has no geometry column."""
    from dataclasses import replace

    if not geometries:
        return sp
    if sp.geometry is not None:
        raise FlawmixError(f"{sp.source or 'specimen table'}: the table has a 'geometry' column and the study "
                           "also names a geometry per lot; keep one of the two")
    missing = [n for n in names if n not in geometries]
    if missing:
        raise FlawmixError(f"study file: lot '{missing[0]}' has no geometry; give every lot one "
                           "(geometry = \"NAME\" in its [lots.NAME] table)")
    geometry = np.array([geometries[names[i]] if i >= 0 else "" for i in index], dtype=object)
    return replace(sp, geometry=geometry)


def _combine(sources, populations, read, geometries) -> Lots:
    """Several tables, each one lot, joined on one population list and one unit."""
    from pathlib import PurePath

    from .specimens import Population

    if isinstance(sources, Mapping):
        named = [(str(k), v) for k, v in sources.items()]
    else:
        named = [(PurePath(str(s)).stem if isinstance(s, (str, Path)) else f"lot {i + 1}", s)
                 for i, s in enumerate(sources)]
    names = [n for n, _ in named]
    if len(set(names)) < len(names):
        raise FlawmixError(f"two specimen tables give the same lot name '{names[0]}'; name the lots in the study "
                           "file ([lots] NAME = \"file.csv\")")
    parts = [read(s, populations) for _, s in named]
    if populations is None:   # each label its own population: the union over every lot
        labels = sorted({p.name for part in parts for p in part.populations})
        if any(part.population_names != tuple(labels) for part in parts):
            pops = tuple(Population(lab, "unspecified", (lab,)) for lab in labels)
            parts = [read(s, pops) for _, s in named]
    unit = parts[0].unit
    parts = [p.in_unit(unit) for p in parts]
    return Lots(_join(parts, names, geometries), np.concatenate([np.full(p.n_specimens, i) for i, p in
                                                                 enumerate(parts)]), tuple(names))


def _join(parts, names, geometries):
    from .specimens import Specimens

    with_geometry = [p.geometry is not None for p in parts]
    if geometries:
        if any(with_geometry):
            raise FlawmixError("the tables have a 'geometry' column and the study also names a geometry per lot; "
                               "keep one of the two")
        missing = [n for n in names if n not in geometries]
        if missing:
            raise FlawmixError(f"study file: lot '{missing[0]}' has no geometry; give every lot one")
        geometry = np.concatenate([np.full(p.n_specimens, geometries[n], dtype=object) for p, n in zip(parts, names)])
    elif any(with_geometry) and not all(with_geometry):
        bad = parts[with_geometry.index(False)]
        raise FlawmixError(f"{bad.source}: no 'geometry' column while another lot's table has one; add it, or name "
                           "each lot's geometry in the study file")
    else:
        geometry = np.concatenate([p.geometry for p in parts]) if all(with_geometry) else None
    ids = np.concatenate([np.array([f"{n}:{i}" for i in p.ids], dtype=object) for p, n in zip(parts, names)])
    cat = lambda attr: np.concatenate([np.asarray(getattr(p, attr)) for p in parts])
    optional = lambda attr: cat(attr) if all(getattr(p, attr) is not None for p in parts) else None
    return Specimens(strength=cat("strength"), failed=cat("failed"), candidates=cat("candidates"),
                     populations=parts[0].populations, unit=parts[0].unit, ids=ids, origin=optional("origin"),
                     source=", ".join(str(p.source or n) for p, n in zip(parts, names)), geometry=geometry,
                     unidentified=optional("unidentified"), uncertain=optional("uncertain"),
                     warnings=tuple(dict.fromkeys(w for p in parts for w in p.warnings)))


# ---- the lot model: lot-specific copies of every population ------------------------------

@dataclass(frozen=True)
class LotModel:
    """k populations in L lots; copy c = l·k + j is population j of lot l. Parameters are
    theta = [u_0..u_{kL−1}, v_0..v_{kL−1}] (ln m, ln σθ − centre) as for any kL-population
    concurrent model. Without geometries the log-likelihood is the sum over lots of each
    lot's concurrent log-likelihood (analytic derivatives); with geometries (or when asked)
    it is the one concurrent model on every specimen, each copy's cumulative hazard switched
    off (offset −∞) outside its lot and scaled by effective size inside it."""

    k: int
    n_lots: int
    per_lot: tuple                 # (L,) lik.Data of each lot, centred
    centre: float
    general: lik.Model             # the kL-copy concurrent model
    combined: lik.Data             # every specimen, candidates over the kL copies
    sized: bool = False
    extras: dict = field(default_factory=dict, compare=False)

    @property
    def n_params(self) -> int:
        return 2 * self.k * self.n_lots

    def columns(self, lot: int) -> np.ndarray:
        """Full-parameter indices (u then v) of one lot's copies."""
        c = np.arange(lot * self.k, (lot + 1) * self.k)
        return np.concatenate([c, self.k * self.n_lots + c])

    def u_index(self, lot: int, population: int) -> int:
        return lot * self.k + population

    def v_index(self, lot: int, population: int) -> int:
        return self.k * self.n_lots + lot * self.k + population

    def derivatives(self, theta: np.ndarray):
        """Log-likelihood, gradient and Hessian at theta (centred scale)."""
        if self.sized:
            return lik.numerical_derivatives(self.general, self.combined, theta)
        return self.block_derivatives(theta)

    def block_derivatives(self, theta: np.ndarray):
        """The fast path: lots are independent given their own copies."""
        P = self.n_params
        ll, grad, hess = 0.0, np.zeros(P), np.zeros((P, P))
        for lot, data in enumerate(self.per_lot):
            cols = self.columns(lot)
            value, g, h = lik.concurrent_derivatives(data, theta[cols])
            ll += value
            grad[cols] += g
            hess[np.ix_(cols, cols)] += h
        return ll, grad, hess

    def bounds(self) -> tuple[np.ndarray, np.ndarray]:
        kL = self.k * self.n_lots
        lo_u, hi_u = (np.log(0.5) + 1e-9, np.log(300.0) - 1e-9) if self.sized else \
            (lik.LOG_MODULUS_MIN, lik.LOG_MODULUS_MAX)
        lower = np.concatenate([np.full(kL, lo_u), np.full(kL, -np.inf)])
        upper = np.concatenate([np.full(kL, hi_u), np.full(kL, np.inf)])
        return lower, upper

    def tie_same_population(self, population: int) -> np.ndarray:
        """(P, P − 2(L−1)): population j's modulus and scale shared by every lot."""
        return self._tie([self.u_index(l, population) for l in range(self.n_lots)],
                         [self.v_index(l, population) for l in range(self.n_lots)])

    def tie_same_modulus(self, population: int) -> np.ndarray:
        """(P, P − (L−1)): population j's modulus shared by every lot, its scale free per lot."""
        return self._tie([self.u_index(l, population) for l in range(self.n_lots)])

    def _tie(self, *groups) -> np.ndarray:
        P = self.n_params
        tied = {i: g[0] for g in groups for i in g}
        free = [i for i in range(P) if tied.get(i, i) == i]
        J = np.zeros((P, len(free)))
        for i in range(P):
            J[i, free.index(tied.get(i, i))] = 1.0
        return J


def lot_model(lots: Lots, geometries=None, force_general: bool = False) -> LotModel:
    """Build the lot model of specimens in lots (geometries: as for :func:`flawmix.fit`);
    ``force_general`` evaluates even unsized lots through the one kL-copy model."""
    sp = lots.specimens
    base, group, G, extras = None, None, 1, {}
    if geometries:
        from .mle import sized_setup

        base, gidx, gnames, reference, geoms = sized_setup(sp, geometries)
        G = len(gnames)
        group = lots.lot * G + gidx
        extras = {"reference_geometry": reference, "geometry_names": gnames, "geometries": geoms}
    return model_from_arrays(np.log(sp.strength), sp.failed, sp.candidates, lots.lot, lots.n_lots, base, group, G,
                             sized=bool(geometries) or force_general, extras=extras)


def model_from_arrays(y, failed, candidates, lot, n_lots: int, size_offsets=None, group=None, n_geometries: int = 1,
                      sized: bool = False, extras=None) -> LotModel:
    """The lot model from arrays: y (N,) ln strength, failed (N,), candidates (N, k), lot (N,)
    index; size_offsets/group/n_geometries as from :func:`flawmix.mle.sized_setup`."""
    k, L, G = candidates.shape[1], n_lots, n_geometries
    centre = float(np.mean(y))
    per_lot = tuple(lik.Data(y[lot == l] - centre, failed[lot == l], candidates[lot == l]) for l in range(L))
    expanded = np.zeros((y.size, k * L), dtype=bool)
    for l in range(L):
        expanded[lot == l, l * k:(l + 1) * k] = candidates[lot == l]

    def offsets(moduli):
        moduli = np.asarray(moduli, dtype=float)
        out = np.full(moduli.shape[:-1] + (L * G, k * L), -np.inf)
        for l in range(L):
            block = 0.0 if size_offsets is None else size_offsets(moduli[..., l * k:(l + 1) * k])
            out[..., l * G:(l + 1) * G, l * k:(l + 1) * k] = block
        return out

    general = lik.Model("concurrent", k * L, size_offsets=offsets)
    combined = lik.Data(y - centre, failed, expanded, geometry=lot if group is None else group)
    return LotModel(k, L, per_lot, centre, general, combined, sized=sized, extras=extras or {})


def simulated_tests(moduli, scales, n_per_lot: int, replicates: int, seed=0, unidentified: float = 0.0,
                    progress: bool = False, calibrate: int = 0, calibrate_keys=("same_population", "same_modulus")) -> dict:
    """Likelihood-ratio p-values of campaigns drawn from known lots (a seeded size and power
    study). moduli, scales: (L, k) truth. Returns ``p_same_population`` and
    ``p_same_modulus`` (R, k) (NaN where a population had no failure in some lot) and
    ``dropped`` (R,) True for those replicates. calibrate: as for :func:`compare_lots`
    (0 here by default: χ² p-values; None: the default reference of the command)."""
    from . import progress as _progress
    from .simulate import Design, simulate

    moduli, scales = np.asarray(moduli, float), np.asarray(scales, float)
    L, k = moduli.shape
    rng = np.random.default_rng(seed)
    design = Design.simple(n_per_lot, unidentified)
    batches = [simulate(lik.Model("concurrent", k), moduli[l], scales[l], None, design, replicates, rng)
               for l in range(L)]
    p_pop = np.full((replicates, k), np.nan)
    p_mod = np.full((replicates, k), np.nan)
    lot = np.repeat(np.arange(L), n_per_lot)
    with _progress.task("simulated lot comparisons", replicates, show=progress) as bar:
        for r in range(replicates):
            y = np.concatenate([b.y[r] for b in batches])
            failed = np.concatenate([b.failed[r] for b in batches])
            cand = np.concatenate([b.candidates[r] for b in batches])
            if any(not (cand[(lot == l) & failed]).any(axis=0).all() for l in range(L)):
                bar.step(r + 1)
                continue
            model = model_from_arrays(y, failed, cand, lot, L)
            free = maximise(model)
            tests = likelihood_ratio_tests(model, free)
            reference_p_values(model, free, tests, calibrate, seed=(seed, r), keys=calibrate_keys)
            p_pop[r] = [t["same_population"]["p_value"] for t in tests]
            p_mod[r] = [t["same_modulus"]["p_value"] for t in tests]
            bar.step(r + 1)
    return {"p_same_population": p_pop, "p_same_modulus": p_mod, "dropped": np.isnan(p_pop[:, 0])}


# ---- maximisation under each hypothesis --------------------------------------------------

def _free_start(model: LotModel, split: str) -> np.ndarray:
    """Each lot's own concurrent fit (EM start) placed in its copies."""
    from .mle import _em_start

    theta = np.zeros(model.n_params)
    for lot, data in enumerate(model.per_lot):
        theta[model.columns(lot)] = _em_start(data, split)
    lower, upper = model.bounds()
    return np.clip(theta, lower, upper)


def _score_tol(model: LotModel) -> float:
    return 1e-6 if model.sized else 1e-9 * max(1.0, model.combined.y.size / 1000.0)


def maximise(model: LotModel, tie: np.ndarray | None = None, starts=None):
    """Best Newton optimum over the starts (free fit: EM starts per lot; tied fits: the
    given full-parameter starts, projected onto the tie)."""
    from .optimize import newton_maximise

    lower, upper = model.bounds()
    if starts is None:
        certain = all(d.certain for d in model.per_lot)
        starts = [_free_start(model, s) for s in (("by-count",) if certain else ("by-count", "equal"))]
    best = None
    for theta0 in starts:
        opt = newton_maximise(model.derivatives, np.clip(theta0, lower, upper), tie=tie, lower=lower, upper=upper,
                              score_tol=_score_tol(model))
        if best is None or opt.loglik > best.loglik + 1e-9:
            best = opt
    return best


def _tied_starts(model: LotModel, free_theta: np.ndarray, population: int) -> list[np.ndarray]:
    """The free optimum projected onto the tie (lot means), and each lot's values copied."""
    starts = [free_theta]
    for lot in range(model.n_lots):
        t = free_theta.copy()
        for other in range(model.n_lots):
            t[model.u_index(other, population)] = free_theta[model.u_index(lot, population)]
            t[model.v_index(other, population)] = free_theta[model.v_index(lot, population)]
        starts.append(t)
    return starts


def likelihood_ratio_tests(model: LotModel, free=None) -> list[dict]:
    """Per population: the likelihood-ratio statistics of "the same in every lot" (2(L−1)
    df) and "same modulus, scale may differ" (L−1 df), other populations free per lot."""
    from scipy import stats

    free = free or maximise(model)
    L = model.n_lots
    out = []
    for j in range(model.k):
        starts = _tied_starts(model, free.theta, j)
        same = maximise(model, model.tie_same_population(j), starts)
        modulus = maximise(model, model.tie_same_modulus(j), starts)
        rows = {}
        for key, opt, df in (("same_population", same, 2 * (L - 1)), ("same_modulus", modulus, L - 1)):
            stat = max(0.0, 2.0 * (free.loglik - opt.loglik))
            rows[key] = {"statistic": stat, "df": df, "p_value": float(stats.chi2.sf(stat, df)),
                         "converged": bool(opt.converged), "theta": opt.theta}
        out.append(rows)
    return out


def reference_p_values(model: LotModel, free, tests: list[dict], calibrate: int | None, seed=0,
                       progress: bool = False, keys=("same_population", "same_modulus")) -> list[dict]:
    """Set each test's p-value from its reference distribution and name it in ``reference``.

    calibrate None (the default): a parametric bootstrap of each test's null fit for lots on
    one geometry (lot_calibration.py: 999 replicates in closed form when every origin is
    identified, 299 batched Newton refits otherwise); the χ² reference, which is a little
    liberal at 30 per lot (7.05 ± 0.57 % at 5 %, studies/lots_labelled_bootstrap.py), for
    lots on several geometries. 0: χ² always. A count: that many bootstrap replicates."""
    from . import lot_calibration
    from . import progress as _progress

    for rows in tests:
        for test in rows.values():
            test["reference"] = "χ²"
    if calibrate == 0:
        return tests
    if calibrate is not None and calibrate < 19:
        raise FlawmixError(f"--calibrate (calibrate=) needs at least 19 replicates, got {calibrate}; use 199 or more, "
                           "or 0 for the χ² reference")
    if model.sized:
        if calibrate is not None:
            raise FlawmixError("calibrated tests for lots on several geometries are not available; use --calibrate 0")
        for rows in tests:
            for test in rows.values():
                test["reference"] += "; not calibrated (lots on several geometries)"
        return tests
    labelled = lot_calibration.applies(model)
    replicates = calibrate or (lot_calibration.DEFAULT_REPLICATES if labelled
                               else lot_calibration.DEFAULT_REPLICATES_GENERAL)
    what = "bootstrap p-values of the tests" + ("" if labelled else f" ({replicates} refits per test)")
    with _progress.task(what, model.k * len(keys), show=progress) as bar:
        return lot_calibration.bootstrap_p_values(model, tests, replicates, seed, keys, bar,
                                                  free_theta=None if free is None else free.theta)


# ---- intervals on changes: profile likelihood of a reparametrised model ---------------------

def _change_derivatives(model: LotModel, population: int, lot_from: int, lot_to: int, a: float):
    """Derivatives in φ, where φ equals theta except that v_to is replaced by
    δ = ln σ_p(to) − ln σ_p(from), σ_p = σθ·(−ln(1 − p))^(1/m) and a = ln(−ln(1 − p))
    (a = 0: δ is the log ratio of characteristic strengths). Returns (to_theta, derivatives)."""
    iu_f, iu_t = model.u_index(lot_from, population), model.u_index(lot_to, population)
    iv_f, iv_t = model.v_index(lot_from, population), model.v_index(lot_to, population)

    def to_theta(phi):
        theta = np.array(phi, dtype=float)
        theta[iv_t] = phi[iv_t] + phi[iv_f] + a * (math.exp(-phi[iu_f]) - math.exp(-phi[iu_t]))
        return theta

    def derivatives(phi):
        theta = to_theta(phi)
        ll, g, H = model.derivatives(theta)
        J = np.eye(theta.size)
        J[iv_t, iv_f] = 1.0
        J[iv_t, iu_f] = -a * math.exp(-phi[iu_f])
        J[iv_t, iu_t] = a * math.exp(-phi[iu_t])
        H_phi = J.T @ H @ J
        H_phi[iu_f, iu_f] += g[iv_t] * a * math.exp(-phi[iu_f])
        H_phi[iu_t, iu_t] -= g[iv_t] * a * math.exp(-phi[iu_t])
        return ll, J.T @ g, H_phi

    return to_theta, derivatives


def change_interval(model: LotModel, free, population: int, lot_from: int, lot_to: int, confidence: float,
                    probability: float | None = None, problems: list | None = None):
    """(ratio, low, high) of σθ (or of the stress at ``probability``, population acting
    alone) of lot ``lot_to`` over lot ``lot_from``: profile likelihood of the log ratio."""
    from .optimize import newton_maximise, profile_interval

    a = 0.0 if probability is None else math.log(-math.log1p(-probability))
    to_theta, derivatives = _change_derivatives(model, population, lot_from, lot_to, a)
    iu_f, iu_t = model.u_index(lot_from, population), model.u_index(lot_to, population)
    iv_f, iv_t = model.v_index(lot_from, population), model.v_index(lot_to, population)
    t = free.theta
    phi = t.copy()
    phi[iv_t] = (t[iv_t] + a * math.exp(-t[iu_t])) - (t[iv_f] + a * math.exp(-t[iu_f]))
    lower, upper = model.bounds()
    opt = newton_maximise(derivatives, phi, lower=lower, upper=upper, score_tol=_score_tol(model))
    lo, hi = profile_interval(derivatives, opt, iv_t, confidence, lower=lower, upper=upper, problems=problems)
    return math.exp(opt.theta[iv_t]), math.exp(lo), math.exp(hi)


# ---- the comparison ---------------------------------------------------------------------

def _check_lots(lots: Lots) -> list[str]:
    """Every population needs a failure in every lot for a finite estimate of its copy;
    returns the doubts about weakly identified copies, each naming its lot."""
    from .specimens import check_estimable

    sp = lots.specimens
    for l, lot in enumerate(lots.names):
        possible = sp.candidates[(lots.lot == l) & sp.failed].sum(axis=0)
        for j, name in enumerate(sp.population_names):
            if possible[j] == 0:
                raise FlawmixError(f"{sp.source or 'specimens'}: population '{name}' has no failure in lot '{lot}', "
                                   "so its strength there has no finite estimate (the change may have removed it); "
                                   "compare the other populations by leaving it out of the grouping, or merge it")
    notes = []
    for l, lot in enumerate(lots.names):
        from dataclasses import replace

        part = replace(lots.subset(l), warnings=())
        notes += [f"lot '{lot}': {w}" for w in check_estimable(part)]
    return notes


def _per_lot_estimates(model: LotModel, free, lots: Lots, confidence: float, problems: list) -> list[list[dict]]:
    """[population][lot] estimate with profile-likelihood intervals in the free model."""
    lower, upper = model.bounds()
    sp = lots.specimens
    single = sp.failed & (sp.n_candidates == 1)
    ends = [_lot_profile_ends(model, free, lot, confidence, problems) for lot in range(model.n_lots)]
    out = []
    for j in range(model.k):
        rows = []
        for l, lot in enumerate(lots.names):
            iu, iv = model.u_index(l, j), model.v_index(l, j)
            (a, b), (c, d) = ends[l][j], ends[l][model.k + j]
            b = math.inf if b >= upper[iu] - 1e-9 else b
            rows.append({"lot": lot, "n_failures": int((single & sp.candidates[:, j] & (lots.lot == l)).sum()),
                         "modulus": math.exp(free.theta[iu]),
                         "characteristic_strength": math.exp(free.theta[iv] + model.centre),
                         "modulus_interval": (math.exp(a), math.exp(b)),
                         "strength_interval": (math.exp(c + model.centre), math.exp(d + model.centre))})
        out.append(rows)
    return out


def _lot_profile_ends(model: LotModel, free, lot: int, confidence: float, problems: list) -> list[tuple]:
    """Profile-likelihood ends of one lot's 2k parameters ([u..., v...] order, centred). In
    the free model a lot's copies are independent of the other lots, so the profile is that
    of the lot's own concurrent likelihood (batched end points, endpoints.py); lots on several
    geometries profile the whole sized model."""
    from .endpoints import batched_profile_intervals
    from .optimize import Optimum, profile_interval

    lower, upper = model.bounds()
    cols = model.columns(lot)
    limits = lambda i: (lower[i], upper[i]) if i < model.k * model.n_lots else (-np.inf, np.inf)
    if model.sized:
        return [profile_interval(model.derivatives, free, int(i), confidence, lower=lower, upper=upper,
                                 limits=limits(int(i)), problems=problems) for i in cols]
    data, lo, hi = model.per_lot[lot], lower[cols], upper[cols]
    derivatives = lambda t: lik.concurrent_derivatives(data, t)
    ll, grad, hess = derivatives(free.theta[cols])
    own = Optimum(free.theta[cols], ll, grad, hess, 0, free.converged)
    own_limits = lambda i: (lo[i], hi[i]) if i < model.k else (-np.inf, np.inf)
    ends = batched_profile_intervals(data, own, confidence, lo, hi, limits=own_limits, problems=problems)
    return [ends[i] if i in ends else profile_interval(derivatives, own, i, confidence, lower=lo, upper=hi,
                                                       limits=own_limits(i), problems=problems)
            for i in range(2 * model.k)]


def _overall_strength(moduli: np.ndarray, scales: np.ndarray, probability: float) -> float:
    """Stress at which all populations together reach ``probability`` (concurrent model)."""
    from scipy.optimize import brentq

    target = -math.log1p(-probability)
    from scipy.special import logsumexp

    f = lambda x: float(logsumexp(moduli * (x - np.log(scales)))) - math.log(target)
    lo, hi = float(np.min(np.log(scales))) - 50.0, float(np.max(np.log(scales))) + 5.0
    return math.exp(brentq(f, lo, hi, xtol=1e-12))


def overall_change(moduli: np.ndarray, scales: np.ndarray, names, populations, probability: float) -> dict:
    """Per lot: the stress at ``probability`` with every population acting, each population's
    share of the risk there, and the failure probability at the baseline lot's stress."""
    rows = []
    baseline = _overall_strength(moduli[0], scales[0], probability)
    for l, lot in enumerate(names):
        stress = _overall_strength(moduli[l], scales[l], probability)
        risk = (stress / scales[l]) ** moduli[l]
        at_base = float(-np.expm1(-np.sum((baseline / scales[l]) ** moduli[l])))
        rows.append({"lot": lot, "stress_at_probability": stress,
                     "risk_shares": dict(zip(populations, (risk / risk.sum()).tolist())),
                     "failure_probability_at_baseline_stress": at_base})
    return {"probability": probability, "by_lot": rows,
            "ratio": rows[-1]["stress_at_probability"] / rows[0]["stress_at_probability"]}


def _posterior_changes(lots: Lots, confidence: float, priors, seed, model: LotModel | None = None) -> tuple[list, list]:
    """Bayes: each lot's posterior (the free lot model factorises over lots, so the joint
    posterior is the product of the lots' own posteriors). Returns per-lot fits and draws.
    Lots on different bars (one bar per lot, ``model`` sized) have each draw's σθ carried to
    the reference geometry, σθ_ref = σθ_own · exp((ln S_own − ln S_ref)/m) with S each
    population's effective size at the draw's modulus (DOMAIN.md section 4)."""
    from .bayes import fit_bayes
    from .geometry import population_log_sizes

    fits = [fit_bayes(lots.subset(l), confidence, priors=priors, seed=None if seed is None else seed + l)
            for l in range(lots.n_lots)]
    size = min(f.draws.moduli.shape[0] for f in fits)
    draws = [(f.draws.moduli[:size], f.draws.scales[:size]) for f in fits]
    if model is not None and model.sized:
        geoms = dict(zip(model.extras["geometry_names"], model.extras["geometries"]))
        ref = geoms[model.extras["reference_geometry"]]
        kinds = [p.kind for p in lots.specimens.populations]
        for l, (m, sc) in enumerate(draws):
            own = geoms[_single_geometry(lots, l)]
            shift = (population_log_sizes(own, kinds, m) - population_log_sizes(ref, kinds, m)) / m
            draws[l] = (m, sc * np.exp(shift))
    return fits, draws


def _single_geometry(lots: Lots, lot: int) -> str:
    """The one geometry of a lot's specimens (Bayes on several bars needs one bar per lot)."""
    own = sorted(set(lots.specimens.geometry[lots.lot == lot]))
    if len(own) != 1:
        raise FlawmixError(f"--method bayes: lot '{lots.names[lot]}' was tested on several geometries "
                           f"({', '.join(own)}); Bayes needs one geometry per lot, use --method mle")
    return own[0]


def compare_lots(lots, populations=None, *, study=None, method: str = "mle", confidence: float | None = None,
                 probability: float | None = None, seed: int | None = 0, progress: bool = False,
                 order: Sequence[str] | None = None, calibrate: int | None = None, **read_options) -> "LotComparison":
    """Compare lots population by population: did a process change move each flaw population?

    lots: a :class:`Lots` (from :func:`read_lots`) or what :func:`read_lots` accepts.
    study: a :class:`flawmix.study.Study` (populations, unit, [lots], geometries, component).
    method: ``mle`` (profile-likelihood intervals) or ``bayes`` (posterior estimates and the
    probability that each population got stronger; the tests stay likelihood-ratio tests).
    probability: the failure probability at which stresses are also compared (default the
    study's [component] target_probability, else 1 %).
    order: the lot names in order (the first is the baseline; default the study's lots,
    else their order of appearance).
    calibrate: the tests' reference distribution (:func:`reference_p_values`): None, the
    default, is a parametric bootstrap for lots on one geometry (999 replicates when every
    origin is identified, 299 otherwise) and χ² for lots on several geometries; 0 is χ²
    always; a count is that many bootstrap replicates.
    """
    from . import progress as _progress

    if method not in ("mle", "bayes"):
        raise FlawmixError(f"unknown method '{method}'; use mle or bayes")
    if not isinstance(lots, Lots):
        lots = read_lots_for_study(lots, study, populations, order=order, **read_options)
    confidence = confidence or (study.confidence if study and study.confidence else 0.90)
    load = study.component_load() if study and study.component else {}
    probability = probability or load.get("target_probability", DEFAULT_PROBABILITY)
    if not 0 < probability < 1:
        raise FlawmixError(f"probability {probability} must lie strictly between 0 and 1 (for example 0.01)")
    doubts = _check_lots(lots)
    geometries = _lot_geometries(lots, study)
    model = lot_model(lots, geometries)
    if method == "bayes" and geometries:
        for lot in range(lots.n_lots):
            _single_geometry(lots, lot)
    problems: list[str] = list(doubts)
    with _progress.task("comparing lots", 3 + model.k, show=progress) as bar:
        free = maximise(model)
        bar.step(1, "free fit")
        tests = likelihood_ratio_tests(model, free)
        reference_p_values(model, free, tests, calibrate, seed, progress)
        bar.step(2, "likelihood-ratio tests")
        estimates = _per_lot_estimates(model, free, lots, confidence, problems)
        bar.step(3, "per-lot intervals")
        changes = []   # [population][lot 1..L−1]: (σθ ratio, stress ratio) against the baseline, with intervals
        for j in range(model.k):
            changes.append([(change_interval(model, free, j, 0, lot, confidence, problems=problems),
                             change_interval(model, free, j, 0, lot, confidence, probability, problems=problems))
                            for lot in range(1, lots.n_lots)])
            bar.step(4 + j, f"changes of '{lots.specimens.population_names[j]}'")
    posterior = _posterior_changes(lots, confidence, study.priors if study else None, seed, model) \
        if method == "bayes" else None
    return _assemble(lots, model, free, tests, estimates, changes, posterior, confidence, probability, method,
                     study, problems)


def _lot_geometries(lots: Lots, study):
    """Geometries to fit jointly when the specimens (of all lots) span several."""
    sp = lots.specimens
    if sp.geometry is None or len(set(sp.geometry)) < 2:
        return None
    if study is None or not study.geometries:
        raise FlawmixError(f"{sp.source or 'specimens'}: the lots were tested on several geometries; describe each "
                           "in the study file ([geometries.NAME]) so they are compared through the material scale")
    return study.geometry_objects()


def _missing(sources) -> bool:
    return sources is None or (isinstance(sources, (list, tuple)) and len(sources) == 0)


def read_lots_for_study(sources, study=None, populations=None, order=None, **read_options) -> Lots:
    """:func:`read_lots` with the study file's populations, unit and [lots] (names, order,
    tables and geometries)."""
    populations = populations if populations is not None else (study.populations if study else None)
    unit = read_options.pop("unit", None) or (study.unit if study else None)
    spec = study.lots if study is not None and getattr(study, "lots", None) else None
    geometries = None
    if spec is not None:
        order = order or [name for name in spec]
        geometries = {n: s["geometry"] for n, s in spec.items() if s.get("geometry")} or None
        tables = {n: s["specimens"] for n, s in spec.items() if s.get("specimens")}
        if tables and _missing(sources):
            sources = tables
    if _missing(sources) and study is not None and study.specimens is not None:
        sources = study.specimens
    if _missing(sources):
        raise FlawmixError("no specimen table given; name one table with a 'lot' column, one table per lot, or "
                           "give each lot's table in the study file ([lots.NAME] specimens = \"file.csv\")")
    if isinstance(sources, (list, tuple)) and len(sources) > 1 and order and len(order) == len(sources):
        sources = dict(zip(order, sources))
    return read_lots(sources, populations, unit, lots=order, geometries=geometries, **read_options)


# ---- the result -------------------------------------------------------------------------

def _num(x):
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


@dataclass(frozen=True)
class LotPopulation:
    """One population across the lots: estimates per lot, tests, the change and its verdict."""

    name: str
    kind: str
    by_lot: tuple
    same_population: dict
    same_modulus: dict
    strength_change: dict
    stress_change: dict
    verdict: str
    changes_by_lot: tuple = ()     # every lot against the baseline (σθ and stress ratios, intervals)

    @property
    def changed(self) -> bool:
        """True when "the same in every lot" is rejected at the 5 % level."""
        return rejects(self.same_population["p_value"])

    def to_dict(self) -> dict:
        test = lambda t: {"statistic": _num(t["statistic"]), "df": int(t["df"]), "p_value": _num(t["p_value"]),
                          "reference": t.get("reference", "χ²"),
                          **{key: _num(t[key]) for key in ("p_value_chi2", "bartlett_factor") if key in t}}
        by_lot = [{"lot": r["lot"], "n_failures": int(r["n_failures"]), "modulus": _num(r["modulus"]),
                   "characteristic_strength": _num(r["characteristic_strength"]),
                   "modulus_interval": [_num(x) for x in r["modulus_interval"]],
                   "strength_interval": [_num(x) for x in r["strength_interval"]]} for r in self.by_lot]
        change = {key: (_num(v) if isinstance(v, float) else [_num(x) for x in v] if isinstance(v, tuple) else v)
                  for key, v in self.strength_change.items()}
        stress = {key: (_num(v) if isinstance(v, float) else [_num(x) for x in v] if isinstance(v, tuple) else v)
                  for key, v in self.stress_change.items()}
        against = [{key: (_num(v) if isinstance(v, float) else [_num(x) for x in v] if isinstance(v, tuple) else v)
                    for key, v in row.items()} for row in self.changes_by_lot]
        return {"name": self.name, "kind": self.kind, "by_lot": by_lot,
                "same_population": test(self.same_population), "same_modulus": test(self.same_modulus),
                "strength_change": change, "stress_change": stress, "changes_by_lot": against,
                "verdict": self.verdict}


@dataclass(frozen=True)
class LotComparison:
    """Lots compared population by population (see :func:`compare_lots`)."""

    lots: tuple[str, ...]
    unit: str
    method: str
    confidence: float
    probability: float
    populations: tuple[LotPopulation, ...]
    overall: dict
    component: dict | None
    verdict: str
    warnings: tuple[str, ...] = ()
    reference_geometry: str | None = None
    log_likelihood: float = float("nan")
    data: Lots | None = field(default=None, repr=False, compare=False)
    lot_lines: tuple = field(default=(), repr=False, compare=False)

    def population(self, name: str) -> LotPopulation:
        for p in self.populations:
            if p.name == name:
                return p
        raise FlawmixError(f"no population '{name}'; the comparison has {', '.join(p.name for p in self.populations)}")

    def plotting_positions(self, rule: str = "hazen"):
        """Each lot's certain failures of each population at Johnson's adjusted ranks within
        its lot (other failures and survivors suspended). Columns: population, lot, specimen,
        strength, probability."""
        import pandas as pd

        from .positions import adjusted_ranks, plotting_positions

        if self.data is None:
            raise FlawmixError("this comparison carries no specimens to plot")
        sp, rows = self.data.specimens, []
        certain = sp.failed & (sp.n_candidates == 1)
        for l, lot in enumerate(self.lots):
            mine = self.data.lot == l
            strength, n = sp.strength[mine], int(mine.sum())
            for j, name in enumerate(sp.population_names):
                hits = (certain & sp.candidates[:, j])[mine]
                if not hits.any():
                    continue
                idx, ranks = adjusted_ranks(strength, hits)
                ids = np.asarray(sp.ids)[mine][idx] if sp.ids is not None else idx
                rows += [{"population": name, "lot": lot, "specimen": i, "strength": x, "probability": q}
                         for i, x, q in zip(ids, strength[idx], plotting_positions(ranks, n, rule))]
        return pd.DataFrame(rows, columns=["population", "lot", "specimen", "strength", "probability"])

    def lines(self):
        """Each lot's fitted line of each population: modulus and the characteristic strength
        of the lot's own geometry (its only one, else the reference geometry)."""
        import pandas as pd

        return pd.DataFrame(self.lot_lines, columns=["population", "lot", "modulus", "characteristic_strength"])

    def moduli(self) -> np.ndarray:
        """(L, k) fitted moduli, lot by lot."""
        return np.array([[p.by_lot[l]["modulus"] for p in self.populations] for l in range(len(self.lots))])

    def characteristic_strengths(self) -> np.ndarray:
        """(L, k) fitted characteristic strengths (of the reference geometry when sized)."""
        return np.array([[p.by_lot[l]["characteristic_strength"] for p in self.populations]
                         for l in range(len(self.lots))])

    def summary(self):
        """One row per population and lot: failures, modulus, σθ with intervals, tests."""
        import pandas as pd

        rows = []
        for p in self.populations:
            for r in p.by_lot:
                rows.append({"population": p.name, "lot": r["lot"], "failures": r["n_failures"],
                             "modulus": r["modulus"], "modulus low": r["modulus_interval"][0],
                             "modulus high": r["modulus_interval"][1], "σθ": r["characteristic_strength"],
                             "σθ low": r["strength_interval"][0], "σθ high": r["strength_interval"][1],
                             "p same population": p.same_population["p_value"],
                             "p same modulus": p.same_modulus["p_value"]})
        return pd.DataFrame(rows).set_index(["population", "lot"])

    def to_dict(self) -> dict:
        out = {"lots": list(self.lots), "unit": self.unit, "method": self.method, "confidence": self.confidence,
               "probability": self.probability, "populations": [p.to_dict() for p in self.populations],
               "overall": _clean(self.overall), "verdict": self.verdict, "warnings": list(self.warnings)}
        if self.component is not None:
            out["component"] = _clean(self.component)
        if self.reference_geometry is not None:
            out["reference_geometry"] = self.reference_geometry
        return out

    def __str__(self) -> str:
        return format_comparison(self)

    def _repr_html_(self) -> str:
        import html

        return f"<pre>{html.escape(str(self))}</pre>"


def _clean(value):
    if isinstance(value, dict):
        return {k: _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    if isinstance(value, (float, np.floating)):
        return _num(value)
    return value


def _percent_change(ratio: float) -> str:
    return f"{100 * (ratio - 1):+.0f} %".replace("-", "−")


def population_verdict(name: str, change: dict, same: dict, modulus: dict, lots: Sequence[str],
                       moduli: Sequence[float] = (), by_lot: Sequence[dict] = ()) -> str:
    """One clause per population, in the words of the evidence scale (flawmix/evidence.py)."""
    p = same["p_value"]
    ratio, (lo, hi) = change["ratio"], change["ratio_interval"]
    span = f"[{100 * (lo - 1):.0f}, {100 * (hi - 1):.0f} %]".replace("-", "−") if math.isfinite(hi) else \
        f"[{100 * (lo - 1):.0f} %, unbounded]".replace("-", "−")
    words = evidence_words(p)
    if not rejects(p):
        hint = "" if words == "no evidence" else f", {words} only"
        text = f"{name}: no detectable change (p = {p:.2g}{hint}; σθ {_percent_change(ratio)} {span})"
    else:
        direction = "up" if ratio >= 1 else "down"
        each = "" if len(by_lot) < 2 else f"; against '{lots[0]}': " + ", ".join(
            f"'{row['to']}' {_percent_change(row['ratio'])}" for row in by_lot)
        text = (f"{name}: σθ {direction} {abs(100 * (ratio - 1)):.0f} % {span} from '{lots[0]}' to '{lots[-1]}', "
                f"{words} of a change (p = {p:.2g}{each})")
        if rejects(modulus["p_value"]):
            shift = f"m {moduli[0]:.3g} → {moduli[-1]:.3g}, " if len(moduli) else ""
            text += f", and its modulus changed ({shift}{evidence_words(modulus['p_value'])}, p = {modulus['p_value']:.2g})"
    if change.get("probability_stronger") is not None:
        text += f", posterior probability that σθ rose {_probability_words(change['probability_stronger'])}"
    return text


def _probability_words(p: float) -> str:
    return "> 0.999" if p > 0.999 else "< 0.001" if p < 0.001 else f"{p:.3f}"


def _overall_sentence(overall: dict, where: str, unit: str) -> str:
    first, last = overall["by_lot"][0], overall["by_lot"][-1]
    held = overall.get("held_equal")
    shares = ", ".join(f"{n} {100 * first['risk_shares'][n]:.0f} % → {100 * last['risk_shares'][n]:.0f} %"
                       for n in first["risk_shares"])
    return (f"{where}: stress at {100 * overall['probability']:g} % failure probability "
            f"{fmt.stress(first['stress_at_probability'])} → {fmt.stress(last['stress_at_probability'])} {unit} "
            f"({_percent_change(overall['ratio'])}); risk shares there: {shares}"
            + (f" ({', '.join(held)} held equal in every lot: no detected change)" if held else ""))


def _assemble(lots, model, free, tests, estimates, changes, posterior, confidence, probability, method, study,
              problems) -> LotComparison:
    sp = lots.specimens
    names, L = sp.population_names, lots.n_lots
    if posterior is not None:
        estimates = _posterior_estimates(estimates, posterior, confidence, model.centre)
    lot_moduli = np.array([[estimates[j][l]["modulus"] for j in range(model.k)] for l in range(L)])
    lot_scales = np.array([[estimates[j][l]["characteristic_strength"] for j in range(model.k)] for l in range(L)])
    pops = []
    for j, pop in enumerate(sp.populations):
        (ratio, lo, hi), (s_ratio, s_lo, s_hi) = changes[j][-1]
        change = {"from": lots.names[0], "to": lots.names[-1], "ratio": ratio, "ratio_interval": (lo, hi),
                  "interval_method": "profile likelihood"}
        by_lot = tuple({"from": lots.names[0], "to": lots.names[l + 1], "ratio": c[0], "ratio_interval": c[1:],
                        "stress_ratio": d[0], "stress_ratio_interval": d[1:]} for l, (c, d) in enumerate(changes[j]))
        stress = {"from": lots.names[0], "to": lots.names[-1], "probability": probability, "ratio": s_ratio,
                  "ratio_interval": (s_lo, s_hi), "interval_method": "profile likelihood"}
        if posterior is not None:
            _add_posterior_change(change, stress, posterior[1], j, probability, confidence)
        same, modulus = tests[j]["same_population"], tests[j]["same_modulus"]
        pops.append(LotPopulation(pop.name, pop.kind, tuple(estimates[j]), same, modulus, change, stress,
                                  population_verdict(pop.name, change, same, modulus, lots.names,
                                                     [row["modulus"] for row in estimates[j]], by_lot), by_lot))
    where = f"overall ({model.extras['reference_geometry']})" if model.sized else "overall (test specimen)"
    held = [j for j in range(model.k) if not pops[j].changed]
    moduli, scales = selected_parameters(model, free, held)
    overall = {**overall_change(moduli, scales, lots.names, names, probability),
               "held_equal": [names[j] for j in held]}
    component = _component_change(lots, study, model, moduli, scales, probability)
    sentences = [p.verdict for p in pops] + [_overall_sentence(overall, where, sp.unit)]
    if component is not None:
        sentences.append(_overall_sentence(component, f"component '{component['name']}'", sp.unit))
    notes = list(sp.warnings) + list(dict.fromkeys(problems))
    if not free.converged:
        notes.append("the free lot fit stopped before the score reached its tolerance")
    verdict = "; ".join(sentences[:len(pops)]) + ". " + ". ".join(s[:1].upper() + s[1:] for s in sentences[len(pops):])
    lines = _own_geometry_lines(lots, model, lot_moduli, lot_scales)
    return LotComparison(lots.names, sp.unit, method, confidence, probability, tuple(pops), overall, component,
                         verdict + ".", tuple(dict.fromkeys(notes)), model.extras.get("reference_geometry"),
                         float(free.loglik - sp.n_failed * model.centre), lots, lines)


def selected_parameters(model: LotModel, free, held: Sequence[int]) -> tuple[np.ndarray, np.ndarray]:
    """(L, k) moduli and characteristic strengths of the model the tests select: the
    populations in ``held`` (no detected change) shared by every lot, the others per lot. The
    overall and component changes use it, so noise in unchanged populations does not pose
    as an effect of the change."""
    theta = free.theta
    if held:
        groups = []
        for j in held:
            groups.append([model.u_index(l, j) for l in range(model.n_lots)])
            groups.append([model.v_index(l, j) for l in range(model.n_lots)])
        theta = maximise(model, model._tie(*groups), [free.theta]).theta
    k, L = model.k, model.n_lots
    moduli = np.exp(np.array([[theta[model.u_index(l, j)] for j in range(k)] for l in range(L)]))
    scales = np.exp(np.array([[theta[model.v_index(l, j)] for j in range(k)] for l in range(L)]) + model.centre)
    return moduli, scales


def _own_geometry_lines(lots, model, moduli, scales) -> tuple:
    """(population, lot, m, σθ) with σθ carried to the lot's own geometry when it has one."""
    from .geometry import population_log_sizes

    out = []
    sp = lots.specimens
    kinds = [p.kind for p in sp.populations]
    for l, lot in enumerate(lots.names):
        s = scales[l]
        if model.sized:
            own = set(sp.geometry[lots.lot == l])
            if len(own) == 1:
                geoms = dict(zip(model.extras["geometry_names"], model.extras["geometries"]))
                ref, mine = geoms[model.extras["reference_geometry"]], geoms[own.pop()]
                s = s * np.exp((population_log_sizes(ref, kinds, moduli[l]) -
                                population_log_sizes(mine, kinds, moduli[l])) / moduli[l])
        out += [(name, lot, float(moduli[l, j]), float(s[j])) for j, name in enumerate(sp.population_names)]
    return tuple(out)


def _posterior_estimates(estimates, posterior, confidence, centre):
    """Per-lot estimates replaced by posterior medians and equal-tailed credible intervals."""
    fits, draws = posterior
    q = [(1 - confidence) / 2, (1 + confidence) / 2]
    out = []
    for j, rows in enumerate(estimates):
        new = []
        for l, row in enumerate(rows):
            m, s = draws[l][0][:, j], draws[l][1][:, j]
            new.append({**row, "modulus": float(np.median(m)), "characteristic_strength": float(np.median(s)),
                        "modulus_interval": tuple(np.quantile(m, q).tolist()),
                        "strength_interval": tuple(np.quantile(s, q).tolist())})
        out.append(new)
    return out


def _add_posterior_change(change, stress, draws, j, probability, confidence):
    """Posterior median and credible interval of the ratios, and P(the population got stronger)."""
    (m0, s0), (m1, s1) = draws[0], draws[-1]
    q = [(1 - confidence) / 2, (1 + confidence) / 2]
    ratio = s1[:, j] / s0[:, j]
    a = -math.log1p(-probability)
    at_p = (s1[:, j] * a ** (1 / m1[:, j])) / (s0[:, j] * a ** (1 / m0[:, j]))
    change.update({"ratio": float(np.median(ratio)), "ratio_interval": tuple(np.quantile(ratio, q).tolist()),
                   "interval_method": "credible (equal-tailed)", "probability_stronger": float(np.mean(ratio > 1))})
    stress.update({"ratio": float(np.median(at_p)), "ratio_interval": tuple(np.quantile(at_p, q).tolist()),
                   "interval_method": "credible (equal-tailed)", "probability_stronger": float(np.mean(at_p > 1))})


def _component_change(lots, study, model, moduli, scales, probability):
    """The change carried to the study's [component], when the study describes one and the
    specimens' geometry (each population scaled by its own effective size and modulus)."""
    if study is None or not study.component:
        return None
    from .geometry import population_log_sizes

    name, body = study.component_object()
    kinds = [p.kind for p in lots.specimens.populations]
    if model.sized:
        coupon = study.geometry_objects()[model.extras["reference_geometry"]]
    else:
        geometry = study.geometry or (lots.specimens.geometry[0] if lots.specimens.geometry is not None else None)
        if geometry is None or geometry not in study.geometry_objects():
            return None
        coupon = study.geometry_objects()[geometry]
    scaled = scales * np.exp((population_log_sizes(coupon, kinds, moduli) - population_log_sizes(body, kinds, moduli))
                             / moduli)
    out = overall_change(moduli, scaled, lots.names, lots.specimens.population_names, probability)
    return {"name": name, **out}


def reference_text(c: "LotComparison") -> str:
    """The tests' reference distributions in one phrase (replicate counts, not usable counts)."""
    return "; ".join(dict.fromkeys(re.sub(r"\d+ of (\d+) replicates usable(; beyond.*)?", r"\1 replicates",
                                          getattr(p, key)["reference"])
                                   for p in c.populations for key in ("same_population", "same_modulus")))


def format_comparison(c: LotComparison) -> str:
    """The comparison as text: per population a table by lot, the tests and the change."""
    from . import formatting as fmt

    level = fmt.level(c.confidence)
    lines = [f"Lots compared population by population ({c.method}; baseline '{c.lots[0]}'; {level}s"
             + (f"; σθ of geometry '{c.reference_geometry}'" if c.reference_geometry else "") + ")", ""]
    width = max([14] + [len(str(name)) + 2 for name in c.lots])    # long lot names keep the columns aligned
    for p in c.populations:
        lines.append(f"{p.name} ({p.kind})")
        lines.append(f"  {'lot':<{width}}{'failures':>9}  {'modulus':>8} {level:>18}  {'σθ (' + c.unit + ')':>10} "
                     f"{level:>20}")
        for r in p.by_lot:
            lines.append(f"  {str(r['lot']):<{width}}{r['n_failures']:>9}  {fmt.modulus(r['modulus']):>8} "
                         f"{fmt.interval(*r['modulus_interval'], kind=fmt.modulus):>18}  "
                         f"{fmt.stress(r['characteristic_strength']):>10} {fmt.interval(*r['strength_interval']):>20}")
        for key, what in (("same_population", "same in every lot"), ("same_modulus", "same modulus, scale may differ")):
            t = getattr(p, key)
            lines.append(f"  test '{what}': LR {t['statistic']:.2f}, {t['df']} df, p = {fmt.p_value(t['p_value'])} "
                         f"({evidence_words(t['p_value'])} against it)")
        for row in p.changes_by_lot[:-1]:       # more than two lots: the others against the baseline too
            lines.append(f"  σθ ratio '{row['to']}'/'{row['from']}': {row['ratio']:.3f} "
                         f"{fmt.interval(*row['ratio_interval'], kind=lambda x: fmt.significant(x, 3))}; stress at "
                         f"{100 * c.probability:g} % (alone): {row['stress_ratio']:.3f} "
                         f"{fmt.interval(*row['stress_ratio_interval'], kind=lambda x: fmt.significant(x, 3))}")
        ch, st = p.strength_change, p.stress_change
        lines.append(f"  σθ ratio '{ch['to']}'/'{ch['from']}': {ch['ratio']:.3f} "
                     f"{fmt.interval(*ch['ratio_interval'], kind=lambda x: fmt.significant(x, 3))}; stress at "
                     f"{100 * st['probability']:g} % (alone): {st['ratio']:.3f} "
                     f"{fmt.interval(*st['ratio_interval'], kind=lambda x: fmt.significant(x, 3))}"
                     + (f"; P(σθ rose) {_probability_words(ch['probability_stronger'])}"
                        if "probability_stronger" in ch else ""))
        lines.append("")
    lines.append(textwrap.fill("p-values: " + reference_text(c), width=92, subsequent_indent="  "))
    lines.append(textwrap.fill("Verdict: " + c.verdict, width=92, subsequent_indent="  ", break_on_hyphens=False))
    return "\n".join(lines)


def comparison_for_report(specimens, study=None, confidence: float = 0.90, seed=0):
    """The lot comparison of a specimen table that has a ``lot`` column with two or more lots
    (None otherwise; the error's text when the lots cannot be compared)."""
    text = _lot_column(specimens)
    if text is None or len(set(text)) < 2:
        return None
    order = list(study.lots) if study is not None and study.lots else None
    try:
        lots = read_lots(specimens, lots=order, geometries={n: s["geometry"] for n, s in study.lots.items()
                                                            if s.get("geometry")} or None
                         if study is not None and study.lots else None)
        return compare_lots(lots, study=study, confidence=confidence, seed=seed)
    except FlawmixError as exc:
        return f"The lots could not be compared: {exc}"
