"""Single-branch fault diagnosis by rank-one (Sherman–Morrison) updates of the solved network.

Hypothesis: exactly one resistor ``k`` differs from the model, its conductance being ``g_k + dg``
(open: ``dg = -g_k``; short: the resistance replaced by ``short_ratio`` times itself; value
change: ``dg`` fitted). Adding ``dg c_k c_k^T`` to the reduced matrix ``A`` changes its inverse by
the Sherman–Morrison formula (Sherman & Morrison, Ann. Math. Statist. 21(1), 1950)::

    (A + dg c c^T)^{-1} = A^{-1} - dg A^{-1} c c^T A^{-1} / (1 + dg c^T A^{-1} c)

so every reading changes exactly by ``f(dg) q_ik`` with ``f(dg) = dg / (1 + dg z_k)``,
``z_k = c_k^T A^{-1} c_k`` (the resistor's own effective resistance in the grounded system) and
``q_ik = dr_i/dg_k`` the first-order sensitivity, which one adjoint solve per reading gives for
all resistors at once (:func:`ohmgraph.engine.readings.sensitivity.conductance_sensitivity`). Resistance
readings live on the passive network, which has its own ``z_k``.

Each hypothesis is scored by weighted least squares against the readings' accuracy bands,
``chi2 = sum_i ((d_i - f q_ik) / band_i)^2`` with ``d_i = measured - model`` (the band is used as
the scale of each reading's error). For one network the best ``chi2`` over ``f`` has the closed
form ``sum d~^2 - (q~.d~)^2 / (q~.q~)`` (``~``: divided by the band) and needs no ``z_k``; over the
two networks together the same decoupled value is a lower bound. Diagonal choice: the ``z_k`` of
every candidate would cost one solve each, so candidates are screened by that lower bound and
only those that could enter the top of the ranking are evaluated exactly, with one solve each
(branch and bound; the evaluated set doubles until no unevaluated candidate's bound beats the last
hypothesis shown). The ranking shown is then exact, not an approximation.

The exact fit searches the new resistance over ``[short_ratio, 1/short_ratio]`` times its model
value on a logarithmic grid refined by golden-section search (Kiefer, Proc. AMS 4(3), 1953). A
branch is called open (short) when that hypothesis's ``chi2`` is within ``KIND_MARGIN = 1`` of the
best fit, the ``Delta chi2 = 1`` interval of one fitted parameter (Press et al., *Numerical
Recipes*, 3rd ed., 2007, section 15.6), else a value change with its estimated resistance.
Candidates whose predicted reading changes coincide cannot be told apart by the readings (for
example resistors in series) and are reported as one group.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np

from .model import ReadingModel
from .sensitivity import (conductance_sensitivity, grounded_self_resistance,
                          resistor_candidates)

SHORT_RATIO = 1e-6
KIND_MARGIN = 1.0
GROUP_TOLERANCE = 1e-6
DISCONNECT_TOLERANCE = 1e-9
SCREEN_CHUNK = 4096
GRID_STEP_DECADES = 0.05
GOLDEN_ITERATIONS = 40


@dataclass(frozen=True)
class Hypothesis:
    """One ranked explanation: a group of resistors the readings cannot tell apart.

    Attributes
    ----------
    branches : ndarray of int64
        The resistors of the group (best first).
    kinds : list of str
        ``"open"``, ``"short"`` or ``"value"`` for each member.
    nominal_ohms, estimated_ohms : ndarray
        Model and estimated resistance of each member (``inf`` for open).
    chi2 : float
        Weighted sum of squared residuals (in bands) of the group's best explanation.
    chi2_open, chi2_short, chi2_value : float
        Of the group's first member (``inf`` for an open that would disconnect part of the
        network seen by a reading).
    max_residual : float
        Largest ``|measured - predicted| / band`` left over.
    left_out : tuple of int
        Readings the hypothesis was fitted without (flagged ones; see
        :func:`ohmgraph.engine.readings.gls.diagnose_parts`, whose ``chi2`` then includes the
        penalty of leaving them out).
    """

    branches: np.ndarray
    kinds: list
    nominal_ohms: np.ndarray
    estimated_ohms: np.ndarray
    chi2: float
    chi2_open: float
    chi2_short: float
    chi2_value: float
    max_residual: float
    left_out: tuple = ()

    @property
    def explains_all(self) -> bool:
        """Every reading falls within its band once the fault is assumed."""
        return bool(self.max_residual <= 1.0)


@dataclass
class Diagnosis:
    """Ranked single-fault hypotheses and the evidence behind the ranking.

    Attributes
    ----------
    hypotheses : list of Hypothesis
    baseline_chi2 : float
        ``chi2`` of "no fault" (the model as it is).
    readings_used : ndarray of int64
        Readings that entered the fit (usable model value, finite measurement, positive band).
    candidates : int
        Resistors considered.
    evaluated : int
        Candidates evaluated exactly (one self-resistance solve each).
    exact : bool
        True when the branch-and-bound proof completed (the ranking shown is exact).
    short_ratio : float
    solves : dict
        Right-hand sides solved: adjoint (one per reading) and self-resistance.
    timings : dict
    notes : list of str
    """

    hypotheses: list
    baseline_chi2: float
    readings_used: np.ndarray
    candidates: int
    evaluated: int
    exact: bool
    short_ratio: float
    solves: dict = field(default_factory=dict)
    timings: dict = field(default_factory=dict)
    notes: list = field(default_factory=list)

    def tied_with_best(self, margin: float = KIND_MARGIN) -> int:
        """How many ranked hypotheses fit within ``margin`` (in chi2) of the best one.

        More than one means the readings, at their accuracy, do not single out the first.
        """
        if not self.hypotheses:
            return 0
        best = self.hypotheses[0].chi2
        return sum(h.chi2 <= best + margin for h in self.hypotheses)


@dataclass
class _Evaluated:
    """Exact fits of a set of candidates (internal)."""

    branches: np.ndarray
    scaled: np.ndarray          # q / band, shape (k, used)
    z: dict                     # system name -> z_k
    chi2_value: np.ndarray
    ratio: np.ndarray           # fitted R_new / R
    chi2_open: np.ndarray
    chi2_short: np.ndarray


def _factor(dg, z):
    """``dg / (1 + dg z)``, the Sherman–Morrison scale of a conductance change."""
    return dg / (1.0 + dg * z)


class _Fit:
    """Weighted least-squares cost of every candidate as a function of its conductance change."""

    def __init__(self, deviation: np.ndarray, masks: dict, scaled: np.ndarray):
        self.baseline = float(deviation @ deviation)
        self.terms = {}
        for name, mask in masks.items():
            part = scaled if mask.all() else scaled[:, mask]
            self.terms[name] = (part @ deviation[mask], np.einsum("ij,ij->i", part, part))

    def lower_bound(self) -> np.ndarray:
        """Best cost with an independent factor per network (exact for one network)."""
        bound = np.full(next(iter(self.terms.values()))[0].shape, self.baseline)
        for a, b in self.terms.values():
            bound -= np.where(b > 0, a ** 2 / np.where(b > 0, b, 1.0), 0.0)
        return np.maximum(bound, 0.0)

    def cost(self, factors: dict) -> np.ndarray:
        """``chi2`` for the given factor ``f`` per network (arrays over candidates)."""
        total = self.baseline
        for name, (a, b) in self.terms.items():
            f = factors[name]
            total = total - 2.0 * f * a + f ** 2 * b
        return np.maximum(total, 0.0)

    def cost_at(self, dg: np.ndarray, z: dict) -> np.ndarray:
        return self.cost({name: _factor(dg, z[name]) for name in self.terms})


def _fit_value(fit: _Fit, g: np.ndarray, z: dict, short_ratio: float, min_change: float = 0.0):
    """Best ``chi2`` over new resistances in ``[short_ratio, 1/short_ratio]`` times the model,
    leaving out ratios within ``(1 - min_change, 1 + min_change)``.

    Grid over ``rho = log10(R_new / R)``, then golden-section search around the best grid point
    (a result inside the excluded interval moves to the better of its two ends).
    """
    span = -np.log10(short_ratio)
    grid = np.arange(-span, span + GRID_STEP_DECADES / 2, GRID_STEP_DECADES)
    gap = (np.log10(1.0 - min_change), np.log10(1.0 + min_change))
    if min_change > 0:
        grid = np.union1d(grid[(grid <= gap[0]) | (grid >= gap[1])], gap)

    def cost(rho):
        return fit.cost_at(g * (10.0 ** -rho - 1.0), z)

    costs = np.stack([cost(np.full(g.shape, rho)) for rho in grid])
    best = np.argmin(costs, axis=0)
    low = grid[np.maximum(best - 1, 0)]
    high = grid[np.minimum(best + 1, grid.size - 1)]
    ratio = (np.sqrt(5.0) - 1.0) / 2.0
    left, right = high - ratio * (high - low), low + ratio * (high - low)
    cost_left, cost_right = cost(left), cost(right)
    for _ in range(GOLDEN_ITERATIONS):
        left_better = cost_left < cost_right
        high = np.where(left_better, right, high)
        low = np.where(left_better, low, left)
        left, right = high - ratio * (high - low), low + ratio * (high - low)
        cost_left, cost_right = cost(left), cost(right)
    rho = np.where(cost_left < cost_right, left, right)
    refined = np.minimum(cost_left, cost_right)
    if min_change > 0:
        inside = (rho > gap[0]) & (rho < gap[1])
        below, above = cost(np.full(g.shape, gap[0])), cost(np.full(g.shape, gap[1]))
        rho = np.where(inside, np.where(below <= above, gap[0], gap[1]), rho)
        refined = np.where(inside, np.minimum(below, above), refined)
    grid_best = costs[best, np.arange(g.size)]
    use_grid = grid_best < refined
    rho = np.where(use_grid, grid[best], rho)
    return np.where(use_grid, grid_best, refined), 10.0 ** rho


def _open_cost(fit: _Fit, g: np.ndarray, z: dict) -> np.ndarray:
    """``chi2`` of the open hypothesis; ``inf`` where it disconnects nodes a reading sees."""
    factors, blocked = {}, np.zeros(g.shape, bool)
    for name, (_, b) in fit.terms.items():
        denominator = 1.0 - g * z[name]
        cut = denominator <= DISCONNECT_TOLERANCE
        blocked |= cut & (b > 0)
        factors[name] = np.where(cut, 0.0, -g / np.where(cut, 1.0, denominator))
    return np.where(blocked, np.inf, fit.cost(factors))


class _Evaluator:
    """Exact evaluation of candidates (one self-resistance solve per candidate and network).

    ``separation`` (None here): when set, an array over the used readings, in the units of
    ``deviation``; candidates whose predicted changes differ from a group leader's by no more
    than it in every reading join the leader's group. ``min_change`` (0 here): value changes
    smaller than this fraction are not considered faults.
    """

    separation = None
    min_change = 0.0

    def __init__(self, model: ReadingModel, used: np.ndarray, deviation: np.ndarray,
                 short_ratio: float, scale: np.ndarray | None = None):
        self.model = model
        self.used = used
        self.deviation = deviation
        self.short_ratio = short_ratio
        system_of = model.system_of()[used]
        self.masks = {name: system_of == name for name in model.systems
                      if np.any(system_of == name)}
        self.inverse_band = 1.0 / (model.readings.band[used] if scale is None else scale)
        self.self_solves = 0

    def fit(self, scaled: np.ndarray) -> _Fit:
        """The least-squares cost of the candidates whose scaled sensitivities are given."""
        return _Fit(self.deviation, self.masks, scaled)

    def scaled(self, branches: np.ndarray) -> np.ndarray:
        """Sensitivities of the used readings divided by their bands, shape (k, used)."""
        sensitivity = conductance_sensitivity(self.model, branches)
        if self.used.size < sensitivity.shape[1]:
            sensitivity = sensitivity[:, self.used]
        sensitivity *= self.inverse_band
        return sensitivity

    def lower_bounds(self, branches: np.ndarray) -> np.ndarray:
        bounds = np.empty(branches.size)
        for start in range(0, branches.size, SCREEN_CHUNK):
            part = branches[start:start + SCREEN_CHUNK]
            bounds[start:start + SCREEN_CHUNK] = self.fit(self.scaled(part)).lower_bound()
        return bounds

    def evaluate(self, branches: np.ndarray) -> _Evaluated:
        net = self.model.network
        scaled = self.scaled(branches)
        fit = self.fit(scaled)
        z = {}
        for name in self.masks:
            rs = self.model.systems[name]
            z[name] = grounded_self_resistance(rs, net, branches)
            self.self_solves += int(np.count_nonzero(
                rs.node_unknown(net.from_node[branches]) != rs.node_unknown(net.to_node[branches])))
        g = 1.0 / net.value[branches]
        chi2_value, ratio = _fit_value(fit, g, z, self.short_ratio, self.min_change)
        chi2_short = fit.cost_at(g * (1.0 / self.short_ratio - 1.0), z)
        return _Evaluated(branches, scaled, z, chi2_value, ratio, _open_cost(fit, g, z),
                          chi2_short)

    def predicted(self, ev: _Evaluated, positions: np.ndarray, dg: np.ndarray) -> np.ndarray:
        """Predicted reading changes (in bands) of the chosen candidates and conductance changes."""
        out = np.zeros((positions.size, self.deviation.size))
        for name, mask in self.masks.items():
            f = _factor(dg, ev.z[name][positions])
            f = np.where(np.isfinite(f), f, 0.0)
            out[:, mask] = f[:, None] * ev.scaled[positions][:, mask]
        return out


def _merge(parts: list) -> _Evaluated:
    return _Evaluated(
        np.concatenate([p.branches for p in parts]),
        np.vstack([p.scaled for p in parts]),
        {name: np.concatenate([p.z[name] for p in parts]) for name in parts[0].z},
        *(np.concatenate([getattr(p, attr) for p in parts])
          for attr in ("chi2_value", "ratio", "chi2_open", "chi2_short")))


def _choose(ev: _Evaluated, g: np.ndarray, short_ratio: float):
    """Kind, best ``chi2``, conductance change and estimated ohms of every evaluated candidate."""
    best = np.minimum(ev.chi2_value, np.minimum(ev.chi2_open, ev.chi2_short))
    is_open = (ev.chi2_open <= best + KIND_MARGIN) & (ev.chi2_open <= ev.chi2_short)
    is_short = ~is_open & (ev.chi2_short <= best + KIND_MARGIN)
    kind = np.where(is_open, "open", np.where(is_short, "short", "value"))
    dg = np.where(is_open, -g, np.where(is_short, g * (1.0 / short_ratio - 1.0),
                                        g * (1.0 / ev.ratio - 1.0)))
    ohms = np.where(is_open, np.inf, np.where(is_short, short_ratio, ev.ratio) / g)
    return kind, best, dg, ohms


def _group(evaluator: _Evaluator, ev: _Evaluated, top: int, short_ratio: float) -> list:
    """Rank evaluated candidates and merge those with the same predicted readings."""
    net = evaluator.model.network
    g = 1.0 / net.value[ev.branches]
    kind, best, dg, ohms = _choose(ev, g, short_ratio)
    order = np.argsort(best, kind="stable")
    taken = np.zeros(ev.branches.size, bool)
    hypotheses = []
    for position, leader in enumerate(order):
        if len(hypotheses) == top:
            break
        if taken[leader]:
            continue
        window = order[position:]
        if evaluator.separation is None:
            tolerance = GROUP_TOLERANCE * max(1.0, best[leader])
            window = window[(best[window] <= best[leader] + tolerance) & ~taken[window]]
            change = evaluator.predicted(ev, window, dg[window])
            scale = max(1.0, float(np.abs(change[0]).max(initial=0.0)))
            same = np.abs(change - change[0]).max(axis=1, initial=0.0) <= GROUP_TOLERANCE * scale
        else:
            window = window[~taken[window]]
            change = evaluator.predicted(ev, window, dg[window])
            same = np.all(np.abs(change - change[0]) <= evaluator.separation, axis=1)
        members = window[same]
        taken[members] = True
        residual = evaluator.deviation - change[0]
        hypotheses.append(Hypothesis(
            branches=ev.branches[members], kinds=kind[members].tolist(),
            nominal_ohms=net.value[ev.branches[members]], estimated_ohms=ohms[members],
            chi2=float(best[leader]), chi2_open=float(ev.chi2_open[leader]),
            chi2_short=float(ev.chi2_short[leader]), chi2_value=float(ev.chi2_value[leader]),
            max_residual=float(np.abs(residual).max(initial=0.0))))
    return hypotheses


def predicted_change(model: ReadingModel, branch: int, new_ohms: float) -> np.ndarray:
    """Exact change of every reading if one resistor took another value (Sherman–Morrison).

    Parameters
    ----------
    model : ReadingModel
    branch : int
        A resistor with positive resistance.
    new_ohms : float
        Its new resistance; ``inf`` for an open.

    Returns
    -------
    ndarray, shape (n_readings,)
        ``new reading - model reading``; ``inf`` or NaN where an open would disconnect nodes a
        reading depends on.
    """
    net = model.network
    branches = np.array([branch], np.int64)
    g = 1.0 / net.value[branch]
    dg = (0.0 if np.isinf(new_ohms) else 1.0 / new_ohms) - g
    sensitivity = conductance_sensitivity(model, branches)[0]
    change = np.zeros(model.readings.n)
    system_of = model.system_of()
    for name, rs in model.systems.items():
        z = grounded_self_resistance(rs, net, branches)[0]
        rows = system_of == name
        with np.errstate(divide="ignore", invalid="ignore"):
            change[rows] = dg / (1.0 + dg * z) * sensitivity[rows]
    return change


def rank_candidates(evaluator: _Evaluator, candidates: np.ndarray, *, top: int, screen: int,
                    max_exact: int):
    """Branch and bound over the candidates: screen by lower bounds, evaluate exactly in rounds.

    Returns
    -------
    hypotheses : list of Hypothesis
    evaluated : int
        Candidates evaluated exactly.
    exact : bool
        True when no unevaluated candidate's bound beats the last hypothesis shown.
    notes : list of str
    timings : dict
    """
    timings, notes = {}, []
    start = time.perf_counter()
    for rs in evaluator.model.systems.values():
        rs.solve_adjoint()
    timings["adjoint"] = time.perf_counter() - start
    start = time.perf_counter()
    bounds = evaluator.lower_bounds(candidates)
    order = np.argsort(bounds, kind="stable")
    timings["screen"] = time.perf_counter() - start

    start = time.perf_counter()
    parts, done, exact = [], 0, True
    target = min(max(screen, top), candidates.size)
    while True:
        parts.append(evaluator.evaluate(candidates[order[done:target]]))
        done = target
        evaluated = _merge(parts)
        hypotheses = _group(evaluator, evaluated, top, evaluator.short_ratio)
        threshold = hypotheses[-1].chi2 if hypotheses else np.inf
        if done == candidates.size:
            break
        if bounds[order[done]] > threshold * (1 + 1e-9) + 1e-12:
            break
        if done >= max_exact:
            exact = False
            notes.append(f"stopped after evaluating {done} candidates exactly; hypotheses below "
                         f"chi2 {bounds[order[done]]:.4g} may be missing from the ranking")
            break
        target = min(2 * done, candidates.size, max_exact)
    timings["evaluate"] = time.perf_counter() - start
    return hypotheses, done, exact, notes, timings


def diagnose(model: ReadingModel, *, top: int = 10, short_ratio: float = SHORT_RATIO,
             screen: int = 64, max_exact: int = 8192) -> Diagnosis:
    """Rank single-resistor faults (open, short, value change) by how well they explain readings.

    Parameters
    ----------
    model : ReadingModel
        Readings with measured values and positive bands.
    top : int
        Number of hypotheses (groups) to rank.
    short_ratio : float
        A short replaces the resistance by ``short_ratio`` times its model value; value changes
        are searched within ``[short_ratio, 1/short_ratio]`` times the model value.
    screen : int
        Candidates evaluated exactly in the first round of the branch and bound.
    max_exact : int
        Most candidates evaluated exactly; if reached, the ranking is marked not proven.

    Returns
    -------
    Diagnosis
    """
    timings, notes = {}, []
    readings = model.readings
    used = np.flatnonzero(model.usable & np.isfinite(readings.measured)
                          & np.isfinite(readings.band) & (readings.band > 0))
    if used.size < readings.n:
        notes.append(f"{readings.n - used.size} reading(s) left out (no finite model value, "
                     "measurement or positive accuracy band)")
    deviation = (readings.measured[used] - model.model_value[used]) / readings.band[used]
    candidates = resistor_candidates(model.network)
    evaluator = _Evaluator(model, used, deviation, short_ratio)
    baseline = float(deviation @ deviation)
    if used.size == 0 or candidates.size == 0:
        return Diagnosis([], baseline, used, int(candidates.size), 0, True, short_ratio,
                         solves={"adjoint": 0, "self_resistance": 0},
                         notes=notes + ["nothing to diagnose"])

    hypotheses, done, exact, rank_notes, rank_timings = rank_candidates(
        evaluator, candidates, top=top, screen=screen, max_exact=max_exact)
    timings.update(rank_timings)
    notes += rank_notes
    solves = {"adjoint": int(sum(rs.rows.size for rs in model.systems.values())),
              "self_resistance": evaluator.self_solves}
    return Diagnosis(hypotheses, baseline, used, int(candidates.size), done, exact, short_ratio,
                     solves, timings, notes)


__all__ = ["diagnose", "rank_candidates", "predicted_change", "Diagnosis", "Hypothesis",
           "SHORT_RATIO", "KIND_MARGIN"]
