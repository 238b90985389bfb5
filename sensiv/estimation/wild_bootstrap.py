r"""Wild cluster bootstrap for 2SLS with few clusters: the wild restricted efficient bootstrap
(WRE) of Davidson & MacKinnon (2010, JBES), computed from cluster-level sums as in Roodman,
MacKinnon, Nielsen & Webb (2019, Stata Journal, section 5) so that no replicate touches rows.

Model (one treatment ``x``, instruments ``Z``, controls ``W``), all variables partialled on
``W`` (marked ``~``).  For a null ``β = β₀``:

1. restricted structural residuals ``ü = ỹ − x̃β₀``;
2. the *efficient* first stage: OLS of ``x̃`` on ``[Z̃, ü]`` gives ``π̃``; its residuals
   ``ṽ = x̃ − Z̃π̃`` keep the part correlated with ``ü``;
3. replicate ``b`` draws one weight ``w_g`` per cluster and sets ``u* = w_g ü``,
   ``x* = Z̃π̃ + w_g ṽ``, ``y* = x*β₀ + u*``; it refits 2SLS with the controls and computes
   the cluster-robust t-statistic ``t*_b`` of ``β = β₀``;
4. the p-value is the share of replicates with ``|t*_b| ≥ |t̂|`` (symmetric test).

Every quantity of step 3 is a function of per-cluster sums ``Z̃_g'ỹ_g, Z̃_g'x̃_g, Z̃_g'Z̃_g,
W_g'ỹ_g, W_g'x̃_g, W_g'Z̃_g`` (one pass over the rows, independent of ``β₀``) and of the weights;
``Z̃ ⊥ W`` makes ``Z̃'M_W a = Z̃'a``, and the within-cluster correction
``Z̃_g'M_W a = Z̃_g'a − Z̃_g'W(W'W)⁻¹W'a`` needs only ``W'a = Σ_h w_h W_h'a_h``.  With all weights
equal to one the formulas give the sample's own cluster t-statistic (a check in the tests).

Weights: Rademacher (±1), or Webb's six-point law (±√½, ±1, ±√1.5, each with probability
1/6; Webb 2023, Canadian Journal of Economics) when there are fewer than
:data:`WEBB_BELOW` clusters.  The interval inverts the test: the same draws serve every null
(so the p-value is one deterministic step function of ``β₀``), each end is bracketed by
stepping out from the analytic cluster interval and then found by bisection on
``p(β₀) − α``; an end that is not reached within :data:`MAX_STEP` standard errors is
reported as unbounded.  No small-sample factor is applied: it would scale ``t̂`` and every
``t*`` alike and leave the p-value unchanged.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from sensiv.core.errors import InputError
from sensiv.core.limits import MAX_REPS, check_count, check_seed
from sensiv.core.results import Interval, json_number
from sensiv.estimation import iv, linalg
from sensiv.core.progress import Progress
from sensiv.estimation.moments import ScoreBlock, cluster_sums

WEBB_BELOW = 12
"""Clusters below which Webb's six-point weights replace Rademacher weights (common
practice, following Webb 2023)."""
MAX_STEP = 1e6
"""Standard errors beyond the estimate at which an end of the interval counts as unbounded."""
BATCH_CELLS = 4_000_000  # replicate × cluster × instrument cells evaluated at once
BISECTIONS = 60
TOLERANCE = 1e-5
"""Bisection stops when the bracket of an end is this many standard errors wide."""
WEBB_VALUES = np.array([-math.sqrt(1.5), -1.0, -math.sqrt(0.5), math.sqrt(0.5), 1.0,
                        math.sqrt(1.5)])


@dataclass(frozen=True, slots=True)
class WildBootstrap:
    """The WRE bootstrap of ``effect = threshold`` and its inverted interval."""

    treatment: str
    threshold: float
    reps: int
    seed: int
    weights: str
    n_clusters: int
    p_value: float
    ci: Interval
    confidence_level: float
    method: str = "wild restricted efficient (Davidson & MacKinnon 2010)"

    def to_dict(self) -> dict:
        return {"method": self.method, "reps": self.reps, "seed": self.seed,
                "weights": self.weights, "p_value": json_number(self.p_value),
                "ci": self.ci.to_list(), "n_clusters": self.n_clusters,
                "threshold": json_number(self.threshold), "treatment": self.treatment,
                "confidence_level": self.confidence_level}

    def assumptions(self) -> list[str]:
        return [f"wild restricted efficient bootstrap over {self.n_clusters} clusters "
                f"({self.reps} replicates, {self.weights} weights, seed {self.seed}); the "
                "interval inverts the bootstrap test with the same draws for every null"]


@dataclass(frozen=True, slots=True)
class ClusterPieces:
    """Per-cluster sums (leading axis: cluster) and totals the replicates are built from."""

    zy: np.ndarray   # (G, l)
    zx: np.ndarray   # (G, l)
    zz: np.ndarray   # (G, l, l)
    wy: np.ndarray   # (G, k_w)
    wx: np.ndarray   # (G, k_w)
    dbar: np.ndarray  # (G, l, k_w): Z̃_g'W (W'W)⁻¹
    wz: np.ndarray   # (G, k_w, l)
    zz_total: np.ndarray
    yx_total: np.ndarray  # [ỹ, x̃]'[ỹ, x̃]


def cluster_pieces(source, pieces) -> ClusterPieces:
    """One pass over the rows: the per-cluster sums of :class:`ClusterPieces`."""
    d, gram = pieces.design, pieces.moments.augmented
    w = d.w
    targets = np.column_stack([d.y, d.x])
    if w.shape[1]:
        targets = targets - w @ linalg.scaled_cholesky(w.T @ gram @ w).solve(w.T @ gram @ targets)
    zt = pieces.z_partialled
    l, k_w = zt.shape[1], w.shape[1]
    block = ScoreBlock("wild", np.hstack([zt, w]), np.hstack([targets, zt]))
    sums = cluster_sums(source.chunks(), pieces.moments.mean, block)
    s = sums.reshape(sums.shape[0], l + k_w, 2 + l)
    wz = s[:, l:, 2:]
    dbar = np.zeros((s.shape[0], l, k_w))
    if k_w:
        ww_inv = np.linalg.inv(w.T @ gram @ w)
        dbar = np.einsum("gkl,km->glm", wz, ww_inv)
    return ClusterPieces(s[:, :l, 0], s[:, :l, 1], s[:, :l, 2:], s[:, l:, 0], s[:, l:, 1],
                         dbar, wz, zt.T @ gram @ zt, targets.T @ gram @ targets)


def draw_weights(n_clusters: int, reps: int, seed: int) -> tuple[np.ndarray, str]:
    """``(reps, G)`` cluster weights and the law's name (Rademacher, or Webb when few)."""
    rng = np.random.default_rng(seed)
    if n_clusters < WEBB_BELOW:
        return rng.choice(WEBB_VALUES, size=(reps, n_clusters)), "webb"
    return rng.choice(np.array([-1.0, 1.0]), size=(reps, n_clusters)), "rademacher"


def t_statistics(cp: ClusterPieces, beta0: float, weights: np.ndarray) -> np.ndarray:
    """Cluster-robust t-statistics of ``β = β₀`` for each row of ``weights`` (``(B, G)``).

    A row of ones gives the sample's own statistic."""
    a = cp.zy - beta0 * cp.zx
    e = cp.wy - beta0 * cp.wx
    z_u = a.sum(axis=0)
    u_u = cp.yx_total[0, 0] - 2 * beta0 * cp.yx_total[0, 1] + beta0 ** 2 * cp.yx_total[1, 1]
    u_x = cp.yx_total[0, 1] - beta0 * cp.yx_total[1, 1]
    l = cp.zz_total.shape[0]
    lhs = np.block([[cp.zz_total, z_u[:, None]], [z_u[None, :], np.array([[u_u]])]])
    rhs = np.append(cp.zx.sum(axis=0), u_x)
    pi = np.linalg.lstsq(lhs, rhs, rcond=None)[0][:l]
    b = cp.zx - cp.zz @ pi
    c = cp.zz @ pi
    f = cp.wx - np.einsum("gkl,l->gk", cp.wz, pi)
    p_inv = np.linalg.inv(cp.zz_total)
    dbar = cp.dbar.reshape(cp.dbar.shape[0], -1)
    rows = max(1, BATCH_CELLS // max(1, weights.shape[1] * l))
    out = np.empty(weights.shape[0])
    for start in range(0, weights.shape[0], rows):
        wt = weights[start:start + rows]
        big_u = wt @ a
        big_x = c.sum(axis=0) + wt @ b
        px = big_x @ p_inv
        h = np.einsum("bl,bl->b", px, big_x)
        delta = np.einsum("bl,bl->b", px, big_u) / h
        # s_bg = π̂*'Z̃_g'û*_g, expanded so that every term is a (B, G) matrix product
        q_e = (px[:, :, None] * (wt @ e)[:, None, :]).reshape(len(wt), -1)
        q_f = (px[:, :, None] * (wt @ f)[:, None, :]).reshape(len(wt), -1)
        s = (wt * (px @ a.T) - q_e @ dbar.T
             - delta[:, None] * (px @ c.T + wt * (px @ b.T) - q_f @ dbar.T))
        se = np.sqrt(np.einsum("bg,bg->b", s, s)) / h
        with np.errstate(divide="ignore", invalid="ignore"):
            out[start:start + rows] = delta / se
    return out


def p_value(cp: ClusterPieces, beta0: float, weights: np.ndarray) -> float:
    """Symmetric bootstrap p-value of ``β = β₀``: share of ``|t*| ≥ |t̂|``."""
    t_hat = t_statistics(cp, beta0, np.ones((1, weights.shape[1])))[0]
    t_star = t_statistics(cp, beta0, weights)
    return float(np.mean(np.abs(t_star) >= abs(t_hat) * (1 - 1e-12)))


def _end(cp, weights, estimate: float, se: float, direction: float, alpha: float) -> float:
    """The end of ``{β₀: p(β₀) > α}`` on one side: step out, then bisect."""
    inside, step = estimate, 2.0 * se  # first trial near the analytic 95% end
    while step <= MAX_STEP * se:
        trial = estimate + direction * step
        if p_value(cp, trial, weights) <= alpha:
            outside = trial
            break
        inside, step = trial, 2.0 * step
    else:
        return direction * math.inf
    for _ in range(BISECTIONS):
        middle = 0.5 * (inside + outside)
        if p_value(cp, middle, weights) > alpha:
            inside = middle
        else:
            outside = middle
        if abs(outside - inside) <= TOLERANCE * se:
            break
    return 0.5 * (inside + outside)


def check_spec(spec) -> str:
    """The one cluster column the bootstrap resamples (InputError without exactly one)."""
    cluster = spec.cluster
    if cluster is None:
        raise InputError("--bootstrap wild resamples clusters: add --cluster COLUMN (one "
                         "cluster variable), or drop --bootstrap")
    if not isinstance(cluster, str):
        raise InputError(f"--bootstrap wild takes one cluster variable; got "
                         f"{list(cluster)}: give one --cluster (e.g. the coarser one)")
    if len(spec.treatments) != 1:
        raise InputError(f"--bootstrap wild tests one treatment; got {len(spec.treatments)}: "
                         "keep one --treatment")
    return cluster


def wild_cluster_bootstrap(source, pieces, fit, *, threshold: float = 0.0, reps: int = 9999,
                           seed: int | None = None, progress: bool = True) -> WildBootstrap:
    """The WRE bootstrap p-value of ``effect = threshold`` and the inverted interval.

    ``fit`` is the :class:`sensiv.estimation.iv.IVFit` of ``source`` (one treatment, one
    cluster variable) and ``pieces`` its pass-1 pieces."""
    cluster = check_spec(source.spec)
    if len(fit.treatments) != 1:
        raise InputError(f"--bootstrap wild tests one treatment; got {len(fit.treatments)}: "
                         "keep one --treatment")
    reps = check_count(reps, "--reps", 1, MAX_REPS, "bootstrap replicates")
    seed = check_seed(seed)
    if seed is None:
        seed = int(np.random.SeedSequence().generate_state(1)[0])
    cp = cluster_pieces(source, pieces)
    n_clusters = cp.zy.shape[0]
    if n_clusters < 2:
        raise InputError(f"cluster variable '{cluster}' has only {n_clusters} group; the wild "
                         "bootstrap needs several clusters: choose another cluster variable")
    weights, law = draw_weights(n_clusters, reps, seed)
    bar = Progress(total=3, label="wild bootstrap", enabled=progress)
    alpha = 1.0 - fit.confidence_level
    name = fit.treatments[0]
    estimate = fit.tsls.value(name)
    se = max(fit.tsls.std_error(name), 1e-300)
    p = p_value(cp, float(threshold), weights)
    bar.update(1)
    low = _end(cp, weights, estimate, se, -1.0, alpha)
    bar.update(2)
    high = _end(cp, weights, estimate, se, 1.0, alpha)
    bar.update(3)
    bar.close()
    return WildBootstrap(name, float(threshold), reps, seed, law, n_clusters, p,
                         Interval(low, high), fit.confidence_level)


BOOTSTRAP_METHODS = ("wild",)


def fit_with_bootstrap(source, *, se: str, confidence_level: float, small: bool,
                       threshold: float = 0.0, reps: int = 9999, seed: int | None = None,
                       progress: bool = True):
    """:func:`sensiv.estimation.iv.fit` of ``source`` with its WRE bootstrap attached
    (``IVFit.bootstrap``); one more pass over the rows gathers the cluster sums."""
    check_spec(source.spec)
    reps = check_count(reps, "--reps", 1, MAX_REPS, "bootstrap replicates")
    seed = check_seed(seed)
    result, pieces, _ = iv.fit_with_pieces(source, se=se, confidence_level=confidence_level,
                                           small=small)
    boot = wild_cluster_bootstrap(source, pieces, result, threshold=threshold, reps=reps,
                                  seed=seed, progress=progress)
    return dataclasses.replace(result, bootstrap=boot)
