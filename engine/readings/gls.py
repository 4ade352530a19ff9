"""Single-fault diagnosis on real parts: generalised least squares with readings flagged.

With parts anywhere within tolerance, the readings of a fault-free network scatter about their
model values with covariance ``Sigma = diag(u_instrument^2) + P P^T / 3``
(:func:`.bands.part_spread`); shared resistors correlate them. A hypothesis (one resistor
changed, :mod:`.diagnosis`) is scored by the generalised least-squares cost (Aitken, Proc. Roy.
Soc. Edinburgh 55, 1935)::

    chi2 = (d - f q)^T Sigma^{-1} (d - f q)

evaluated on the whitened system ``L^{-1} d``, ``L^{-1} q`` with ``Sigma = L L^T`` (Cholesky),
so that the normal part spread is not read as a fault. The screening bound and the exact fit
through Sherman–Morrison updates are those of :mod:`.diagnosis`; the cost changes (the two
networks, powered and passive, now couple through ``Sigma``) and so does the grouping: faults
whose predicted readings differ by no more than ``3 sigma_i`` (the combined standard
uncertainty of each reading) in every reading cannot be told apart and form one group.

*No fault indicated* when the cost of the model as it is stays within the chi-square quantile
of ``n`` degrees of freedom at ``1 - alpha`` (``alpha``: ``significance``, default 1 %).

*Readings no hypothesis explains* are found by leave-one-out: deleting reading ``i`` from a
generalised least-squares fit is the same as giving it a free offset (the mean-shift outlier
model; Cook & Weisberg, *Residuals and Influence in Regression*, 1982, §2.2), which has a
closed form with ``gamma = Sigma^{-1} d`` and ``eta_i = (Sigma^{-1})_ii``, for every candidate
and every reading at once. The most promising readings are re-ranked exactly without them; a
reading is flagged when the drop of the best cost passes one of the tests of :mod:`.contact`
(a gross error on any reading; a contact error on a resistance reading read high, with a lower
limit), the largest drop minus limit first (at most ``max_flagged``). The ranking shown puts the
hypotheses fitted without the flagged readings, their cost plus the limits passed (a penalised
likelihood), together with those fitted on every reading.

*Two faults*: when no single fault fits (best cost above the quantile of ``n - 1`` degrees of
freedom), every pair among the best ``pair_pool`` single faults is fitted with both values free.
A rank-two update (Woodbury, 1950) gives the exact readings of a pair: with ``Z`` the 2 x 2 matrix
``c_j^T A^{-1} c_k`` and ``D = diag(dg)``, the branch states become ``s' = (I + Z D)^{-1} s`` and
every reading changes by ``sum_j dg_j p_j s'_j`` (``s`` the branch voltage and ``p = beta -
c^T lambda`` on the powered network; ``s = c^T lambda``, ``p = -c^T lambda`` on the passive
one), which is the Sherman–Morrison step of :mod:`.diagnosis` for one resistor. The two
log-ratios are fitted by bounded trust-region least squares (``scipy.optimize.least_squares``).
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field, replace

import numpy as np
from scipy.linalg import cho_solve, cholesky, solve_triangular
from scipy.optimize import least_squares
from scipy.stats import chi2 as chi2_distribution

from .bands import ReadingBands
from .contact import (CONTACT_KINDS, DEFAULT_CONTACT_MAX_OHMS, contact_drop, contact_limit,
                      gross_limit, mean_shift)
from .diagnosis import (SCREEN_CHUNK, SHORT_RATIO, Diagnosis, _Evaluator, predicted_change,
                        rank_candidates)
from .model import POWERED, ReadingModel
from .sensitivity import resistor_candidates

DEFAULT_SIGNIFICANCE = 0.01
DEFAULT_CONTACT_SIGNIFICANCE = 0.05
PAIR_POOL = 50
MAX_FLAGGED = 3
TINY = 1e-12
SEPARATION = 3.0          # standard deviations: faults closer in every reading are one group
FLAG_TRIES = 5            # readings re-ranked per flagging round
DEFAULT_MIN_CHANGE = 0.1


class _CorrelatedFit:
    """Generalised least-squares cost of candidates as functions of one factor per network."""

    def __init__(self, whitened: np.ndarray, masks: dict, scaled: np.ndarray,
                 factor: np.ndarray):
        self.baseline = float(whitened @ whitened)
        columns = {name: solve_triangular(factor, np.where(mask, scaled, 0.0).T, lower=True,
                                          check_finite=False)
                   for name, mask in masks.items()}
        self.terms = {name: (w.T @ whitened, np.einsum("ik,ik->k", w, w))
                      for name, w in columns.items()}
        values = list(columns.values())
        self.cross = np.einsum("ik,ik->k", *values) if len(values) == 2 else None

    def lower_bound(self) -> np.ndarray:
        """Best cost with a free factor per network (exact for one network)."""
        return np.maximum(self.baseline - _reduction(list(self.terms.values()), self.cross), 0.0)

    def cost(self, factors: dict) -> np.ndarray:
        total = self.baseline
        for name, (a, b) in self.terms.items():
            f = factors[name]
            total = total - 2.0 * f * a + f ** 2 * b
        if self.cross is not None:
            first, second = (factors[name] for name in self.terms)
            total = total + 2.0 * first * second * self.cross
        return np.maximum(total, 0.0)

    def cost_at(self, dg: np.ndarray, z: dict) -> np.ndarray:
        return self.cost({name: dg / (1.0 + dg * z[name]) for name in self.terms})


def _reduction(terms: list, cross) -> np.ndarray:
    """``a^T B^{-1} a`` for one or two factors (``terms``: ``(a_n, B_nn)``, ``cross``: ``B_12``)."""
    singles = [np.where(b > TINY, a ** 2 / np.where(b > TINY, b, 1.0), 0.0) for a, b in terms]
    if cross is None:
        return singles[0]
    (a1, b1), (a2, b2) = terms
    det = b1 * b2 - cross ** 2
    solvable = det > 1e-9 * np.maximum(b1 * b2, TINY)
    joint = (b2 * a1 ** 2 - 2.0 * cross * a1 * a2 + b1 * a2 ** 2) / np.where(solvable, det, 1.0)
    return np.where(solvable, joint, np.maximum(*singles))


class _GLSEvaluator(_Evaluator):
    """The evaluator of :mod:`.diagnosis` with the correlated (whitened) cost."""

    def __init__(self, model: ReadingModel, used: np.ndarray, measured_minus_model: np.ndarray,
                 scale: np.ndarray, covariance: np.ndarray, short_ratio: float,
                 min_change: float):
        super().__init__(model, used, measured_minus_model / scale, short_ratio, scale)
        self.min_change = min_change
        self.separation = SEPARATION * np.sqrt(np.diag(covariance)) / scale
        self.correlation = covariance / np.outer(scale, scale)
        self.factor = cholesky(self.correlation, lower=True, check_finite=False)
        self.whitened = solve_triangular(self.factor, self.deviation, lower=True)

    def fit(self, scaled: np.ndarray) -> _CorrelatedFit:
        return _CorrelatedFit(self.whitened, self.masks, scaled, self.factor)

    def deletion_bounds(self, candidates: np.ndarray) -> np.ndarray:
        """Best cost (lower bound over candidates and "no fault") with each reading left out.

        Leaving reading ``i`` out equals fitting a free offset on it; eliminating that offset
        from the normal equations leaves the bound of :class:`_CorrelatedFit` on reduced terms.
        """
        inverse = cho_solve((self.factor, True), np.eye(self.used.size), check_finite=False)
        gamma = inverse @ self.deviation
        eta = np.diag(inverse).copy()
        shift = gamma / eta
        base = float(self.whitened @ self.whitened) - gamma * shift
        best = base.copy()
        for start in range(0, candidates.size, SCREEN_CHUNK):
            scaled = self.scaled(candidates[start:start + SCREEN_CHUNK])
            parts = {name: np.where(mask, scaled, 0.0) for name, mask in self.masks.items()}
            mixed = {name: part @ inverse for name, part in parts.items()}
            terms = []
            for name, part in parts.items():
                a = part @ gamma
                b = np.einsum("ki,ki->k", mixed[name], part)
                terms.append((a[:, None] - mixed[name] * shift,
                              b[:, None] - mixed[name] ** 2 / eta))
            cross = None
            if len(parts) == 2:
                second = list(parts.values())[1]
                m1, m2 = mixed.values()
                cross = (np.einsum("ki,ki->k", m1, second)[:, None] - m1 * m2 / eta)
            bound = base[None, :] - _reduction(terms, cross)
            best = np.minimum(best, bound.min(axis=0))
        return np.maximum(best, 0.0)


@dataclass(frozen=True)
class FlaggedReading:
    """A reading left out because a shift of that reading alone explains the readings better.

    Attributes
    ----------
    reading : int
        Index of the reading.
    test : {"contact", "gross"}
        ``contact``: a resistance reading read high (one-sided test); ``gross``: any reading,
        either sign.
    drop : float
        Best cost of the hypotheses with all readings minus the best with an offset on this one
        (the likelihood-ratio statistic of the mean-shift model; for ``contact`` the offset
        held within ``(0, contact_max]``).
    statistic : float
        ``sign(shift) sqrt(drop)``, compared with ``sqrt(limit)`` (one-sided for ``contact``).
    limit : float
        The limit ``drop`` exceeded (:mod:`.contact`).
    shift, shift_std : float
        Estimated offset of the reading (measured minus what the best hypothesis and the other
        readings imply; reading units) and its standard uncertainty (``|shift| / sqrt(drop)``,
        the fault refitted).
    """

    reading: int
    test: str
    drop: float
    statistic: float
    limit: float
    shift: float
    shift_std: float


@dataclass(frozen=True)
class PairHypothesis:
    """Two resistors changed at once.

    Attributes
    ----------
    branches : ndarray of int64, shape (2,)
    nominal_ohms, estimated_ohms : ndarray, shape (2,)
    chi2 : float
    max_residual : float
        Largest ``|measured - predicted| / band`` left over.
    """

    branches: np.ndarray
    nominal_ohms: np.ndarray
    estimated_ohms: np.ndarray
    chi2: float
    max_residual: float

    @property
    def explains_all(self) -> bool:
        return bool(self.max_residual <= 1.0)


@dataclass
class PartsDiagnosis:
    """Generalised least-squares diagnosis, with flagged readings and two-fault hypotheses.

    Attributes
    ----------
    ranking : Diagnosis
        Single-fault ranking on the readings kept (flagged ones left out).
    first_ranking : Diagnosis
        The ranking on every usable reading, before any was flagged.
    flagged : list of FlaggedReading
        In flagging order.
    significance : float
    fault_indicated : bool
        The cost of "no fault" on the kept readings exceeds its chi-square quantile.
    single_fits : bool
        The best single fault's cost is within the quantile of ``n - 1`` degrees of freedom.
    limits : dict
        The limits used: chi-square quantiles ``no_fault``, ``single``, ``flag`` (gross error)
        and ``contact`` (the square of the one-sided normal quantile), of the last round.
    pairs : list of PairHypothesis
        Best two-fault hypotheses (only when no single fault fits).
    timings : dict
    notes : list of str
    contact_significance : float
        ``alpha`` of the contact-error test (0: not run).
    """

    ranking: Diagnosis
    first_ranking: Diagnosis
    flagged: list
    significance: float
    fault_indicated: bool
    single_fits: bool
    limits: dict
    pairs: list = field(default_factory=list)
    timings: dict = field(default_factory=dict)
    notes: list = field(default_factory=list)
    contact_significance: float = DEFAULT_CONTACT_SIGNIFICANCE


def _rank(model, used, deviation, bands, covariance, candidates, options):
    short_ratio, min_change, top, screen, max_exact = options
    evaluator = _GLSEvaluator(model, used, deviation[used], bands.band[used],
                              covariance[np.ix_(used, used)], short_ratio, min_change)
    baseline = float(evaluator.whitened @ evaluator.whitened)
    hypotheses, done, exact, notes, timings = rank_candidates(
        evaluator, candidates, top=top, screen=screen, max_exact=max_exact)
    solves = {"adjoint": int(sum(rs.rows.size for rs in model.systems.values())),
              "self_resistance": evaluator.self_solves}
    return evaluator, Diagnosis(hypotheses, baseline, used, int(candidates.size), done, exact,
                                short_ratio, solves, timings, notes)


def _best(diagnosis: Diagnosis) -> float:
    best = diagnosis.hypotheses[0].chi2 if diagnosis.hypotheses else np.inf
    return min(best, diagnosis.baseline_chi2)


def _change(model: ReadingModel, ranking: Diagnosis) -> np.ndarray:
    """Predicted change of every reading under the best hypothesis of ``ranking`` (zero when
    "no fault" fits best)."""
    if ranking.hypotheses and ranking.hypotheses[0].chi2 < ranking.baseline_chi2:
        best = ranking.hypotheses[0]
        return predicted_change(model, int(best.branches[0]), float(best.estimated_ohms[0]))
    return np.zeros(model.readings.n)


def _flag_one(rank, kept, deviation, part_covariance, bands, candidates, evaluator, ranking,
              settings, limits):
    """The reading whose offset most improves the penalised fit, or None.

    Each reading ``j`` is a joint hypothesis (best fault, offset on ``j``); it beats the best
    hypothesis without an offset when the drop of the best cost exceeds the limit of its test
    (:mod:`.contact`: gross error on any reading, contact error on a resistance reading read
    high). The deletion bounds pick ``FLAG_TRIES`` readings to re-rank exactly; of the tests
    passed, the one with the largest drop minus limit (the best penalised cost) is flagged.
    """
    significance, contact_significance, contact_max = settings
    model = evaluator.model
    parts = part_covariance[np.ix_(kept, kept)]
    covariance = parts + np.diag(bands.instrument_std[kept] ** 2)
    eligible = np.isin(model.readings.kind[kept], CONTACT_KINDS)
    gross = gross_limit(kept.size, significance)
    contact = contact_limit(parts, bands.instrument[kept], eligible,
                            contact_significance if contact_max > 0 else 0.0)
    limits["flag"], limits["contact"] = gross, contact
    best = _best(ranking)
    margin = (best - evaluator.deletion_bounds(candidates)
              - np.where(eligible, min(gross, contact), gross))
    found, score = None, 0.0
    # The bounds relax the fault size, so the few most promising readings are re-ranked.
    for position in np.argsort(-margin, kind="stable")[:FLAG_TRIES]:
        if margin[position] <= 0:
            break
        trial = np.delete(kept, position)
        trial_evaluator, trial_ranking = rank(trial)
        drop = best - _best(trial_ranking)
        shift = mean_shift(deviation[kept] - _change(model, trial_ranking)[kept], covariance,
                           position)
        tests = [("gross", drop, gross)]
        if eligible[position]:
            tests.append(("contact", contact_drop(drop, shift, contact_max), contact))
        for test, value, limit in tests:
            if value - limit > score:
                score = value - limit
                flag = FlaggedReading(
                    int(kept[position]), test, float(value),
                    float(np.copysign(np.sqrt(max(value, 0.0)), shift)), float(limit), shift,
                    float(abs(shift) / np.sqrt(drop)) if drop > 0 else np.inf)
                found = (flag, trial, trial_evaluator, trial_ranking)
    return found


def diagnose_parts(model: ReadingModel, bands: ReadingBands, part_covariance: np.ndarray, *,
                   top: int = 10, short_ratio: float = SHORT_RATIO,
                   min_change: float = DEFAULT_MIN_CHANGE,
                   significance: float = DEFAULT_SIGNIFICANCE, max_flagged: int = MAX_FLAGGED,
                   contact_significance: float = DEFAULT_CONTACT_SIGNIFICANCE,
                   contact_max: float = DEFAULT_CONTACT_MAX_OHMS,
                   pair_pool: int = PAIR_POOL, pairs: int = 5, screen: int = 64,
                   max_exact: int = 8192) -> PartsDiagnosis:
    """Rank single faults by generalised least squares, flag unexplained readings, try pairs.

    Parameters
    ----------
    model : ReadingModel
        Readings with measured values; ``readings.band`` is the instrument's accuracy limit.
    bands : ReadingBands
        From :func:`.bands.reading_bands`: the instrument's standard uncertainty and the band
        each reading's residual is measured against.
    part_covariance : ndarray, shape (n_readings, n_readings)
        ``P P^T / 3`` from :func:`.bands.part_spread` (``covariance=True``).
    top : int
        Single-fault hypotheses (groups) to rank.
    short_ratio : float
        As in :func:`.diagnosis.diagnose`.
    min_change : float
        Smallest value change called a fault (a fraction; default 0.1): a part closer to its
        nominal value than this is within the spread the covariance already allows for.
    significance : float
        ``alpha`` of the chi-square tests.
    max_flagged : int
        Most readings flagged (0: none).
    contact_significance : float
        Family-wise ``alpha`` of the one-sided contact-error test over the resistance readings
        (0: no contact test; readings are then flagged by the gross-error test only).
    contact_max : float
        Largest resistance a poor contact is taken to add (ohms; default 5).
    pair_pool, pairs : int
        Two-fault hypotheses among the best ``pair_pool`` single faults; ``pairs`` shown.
    screen, max_exact : int
        As in :func:`.diagnosis.diagnose`.
    """
    readings = model.readings
    timings, notes = {}, []
    covariance = part_covariance + np.diag(bands.instrument_std ** 2)
    used = np.flatnonzero(model.usable & np.isfinite(readings.measured)
                          & np.isfinite(bands.band) & (bands.band > 0)
                          & (np.diag(covariance) > 0))
    if used.size < readings.n:
        notes.append(f"{readings.n - used.size} reading(s) left out (no finite model value, "
                     "measurement or positive band)")
    deviation = np.where(np.isfinite(readings.measured), readings.measured - model.model_value,
                         0.0)
    candidates = resistor_candidates(model.network)
    limits = {}
    if used.size == 0 or candidates.size == 0:
        empty = Diagnosis([], 0.0, used, int(candidates.size), 0, True, short_ratio,
                          solves={"adjoint": 0, "self_resistance": 0},
                          notes=["nothing to diagnose"])
        return PartsDiagnosis(empty, empty, [], significance, False, True, limits,
                              notes=notes + ["nothing to diagnose"],
                              contact_significance=contact_significance)

    start = time.perf_counter()
    options = (short_ratio, min_change, max(top, pair_pool), screen, max_exact)

    def rank(kept):
        return _rank(model, kept, deviation, bands, covariance, candidates, options)

    evaluator, ranking = rank(used)
    first = ranking
    timings["rank"] = time.perf_counter() - start
    start = time.perf_counter()
    flagged, kept, penalty = [], used, 0.0
    while len(flagged) < max_flagged and kept.size > 2:
        found = _flag_one(rank, kept, deviation, part_covariance, bands, candidates, evaluator,
                          ranking, (significance, contact_significance, contact_max), limits)
        if found is None:
            break
        flag, kept, evaluator, trial_ranking = found
        # Penalised cost of the offsets: the limit, plus what holding a contact offset within
        # its range gives back.
        penalty += flag.limit + (_best(ranking) - _best(trial_ranking)) - flag.drop
        ranking = trial_ranking
        flagged.append(flag)
    timings["flag"] = time.perf_counter() - start

    limits["no_fault"] = float(chi2_distribution.ppf(1.0 - significance, kept.size))
    limits["single"] = float(chi2_distribution.ppf(1.0 - significance, max(kept.size - 1, 1)))
    fault_indicated = ranking.baseline_chi2 > limits["no_fault"]
    single_fits = bool(ranking.hypotheses) and ranking.hypotheses[0].chi2 <= limits["single"]
    pair_hypotheses = []
    if fault_indicated and not single_fits and ranking.hypotheses and pairs:
        start = time.perf_counter()
        pool = ranking.hypotheses[:pair_pool]
        pair_hypotheses = _fit_pairs(evaluator, pool, pairs)
        timings["pairs"] = time.perf_counter() - start
    joint = _joint(first.hypotheses, ranking.hypotheses, flagged, penalty, top)
    first.hypotheses = first.hypotheses[:top]
    ranking = replace(ranking, hypotheses=joint)
    limits["penalty"] = penalty
    return PartsDiagnosis(ranking, first, flagged, significance, bool(fault_indicated),
                          single_fits, limits, pair_hypotheses, timings, notes,
                          contact_significance)


def _joint(all_readings: list, kept: list, flagged: list, penalty: float, top: int) -> list:
    """The hypotheses fitted without the flagged readings (their cost plus ``penalty``) and
    those fitted on every reading, ranked together by penalised cost; a resistor is shown in
    its best group only."""
    if not flagged:
        return kept[:top]
    left_out = tuple(flag.reading for flag in flagged)
    entries = sorted([(h.chi2 + penalty, 0, i, h) for i, h in enumerate(kept)]
                     + [(h.chi2, 1, i, h) for i, h in enumerate(all_readings)],
                     key=lambda entry: entry[:3])
    shown, seen = [], set()
    for cost, source, _, h in entries:
        if len(shown) == top:
            break
        members = [m for m, branch in enumerate(h.branches) if int(branch) not in seen]
        if not members or int(h.branches[0]) in seen:
            continue
        seen.update(int(h.branches[m]) for m in members)
        shown.append(replace(h, branches=h.branches[members],
                             kinds=[h.kinds[m] for m in members],
                             nominal_ohms=h.nominal_ohms[members],
                             estimated_ohms=h.estimated_ohms[members], chi2=float(cost),
                             left_out=left_out if source == 0 else ()))
    return shown


class _PairModel:
    """Exact readings of two simultaneous resistor changes among a pool (rank-two update)."""

    def __init__(self, evaluator: _GLSEvaluator, branches: np.ndarray):
        model, net = evaluator.model, evaluator.model.network
        self.evaluator = evaluator
        self.branches = branches
        self.parts = []
        for name, mask in evaluator.masks.items():
            rs = model.systems[name]
            columns = np.searchsorted(rs.rows, evaluator.used[mask])
            along = rs.incidence_products(net, branches, rs.solve_adjoint())[:, columns]
            if name == POWERED:
                beta = rs.direct.tocsc()[:, branches].T.toarray()[:, columns]
                state = np.repeat(rs.branch_voltage[branches][:, None], columns.size, axis=1)
                slope = beta - along
            else:
                state, slope = along, -along
            self.parts.append((mask, self._transfer(rs, net, branches), state, slope))

    @staticmethod
    def _transfer(rs, net, branches) -> np.ndarray:
        """``c_j^T A^{-1} c_k`` over the pool (one solve per resistor)."""
        ua = rs.node_unknown(net.from_node[branches])
        ub = rs.node_unknown(net.to_node[branches])
        block = np.zeros((rs.system.n_unknowns, branches.size))
        columns = np.arange(branches.size)
        block[ua[ua >= 0], columns[ua >= 0]] = 1.0
        block[ub[ub >= 0], columns[ub >= 0]] -= 1.0
        rs.session.expect(branches.size)
        solved = np.vstack([rs.session.solve(block), np.zeros((1, branches.size))])
        return rs.incidence_products(net, branches, solved)

    def change(self, pair: tuple, dg: np.ndarray) -> np.ndarray:
        """Predicted change of the used readings, in bands (``inf`` where the pair cuts a
        reading off)."""
        out = np.zeros(self.evaluator.used.size)
        index = np.array(pair)
        for mask, transfer, state, slope in self.parts:
            matrix = np.eye(2) + transfer[np.ix_(index, index)] * dg[None, :]
            try:
                new_state = np.linalg.solve(matrix, state[index])
            except np.linalg.LinAlgError:
                out[mask] = np.inf
                continue
            out[mask] = (dg[:, None] * slope[index] * new_state).sum(axis=0)
        return out * self.evaluator.inverse_band


def _fit_pairs(evaluator: _GLSEvaluator, pool: list, count: int) -> list:
    """Best ``count`` two-fault hypotheses among the leaders of the ``pool`` groups."""
    net = evaluator.model.network
    branches = np.array([h.branches[0] for h in pool], np.int64)
    if branches.size < 2:
        return []
    start_ratio = np.array([h.estimated_ohms[0] / h.nominal_ohms[0] for h in pool])
    span = -np.log10(evaluator.short_ratio)
    start_rho = np.clip(np.log10(np.where(np.isfinite(start_ratio), start_ratio,
                                          1.0 / evaluator.short_ratio)), -span, span)
    g = 1.0 / net.value[branches]
    pair_model = _PairModel(evaluator, branches)
    results = []
    for first in range(branches.size):
        for second in range(first + 1, branches.size):
            index = (first, second)
            conductance = g[list(index)]

            def residual(rho, index=index, conductance=conductance):
                change = pair_model.change(index, conductance * (10.0 ** -rho - 1.0))
                if not np.all(np.isfinite(change)):
                    return np.full(evaluator.whitened.size, 1e6)
                return evaluator.whitened - solve_triangular(evaluator.factor, change,
                                                             lower=True, check_finite=False)

            guess = np.array([start_rho[first], start_rho[second]])
            fitted = least_squares(residual, guess, bounds=(-span, span), method="trf",
                                   x_scale=1.0, max_nfev=60)
            cost = float(fitted.fun @ fitted.fun)
            change = pair_model.change(index, conductance * (10.0 ** -fitted.x - 1.0))
            results.append(PairHypothesis(
                branches=branches[list(index)], nominal_ohms=net.value[branches[list(index)]],
                estimated_ohms=net.value[branches[list(index)]] * 10.0 ** fitted.x, chi2=cost,
                max_residual=float(np.abs(evaluator.deviation - change).max(initial=0.0))))
    results.sort(key=lambda h: h.chi2)
    return results[:count]


__all__ = ["diagnose_parts", "PartsDiagnosis", "FlaggedReading",
           "PairHypothesis", "DEFAULT_SIGNIFICANCE", "DEFAULT_CONTACT_SIGNIFICANCE",
           "CONTACT_KINDS", "PAIR_POOL", "MAX_FLAGGED"]
