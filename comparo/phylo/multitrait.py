"""Multivariate Brownian motion on a tree with missing values, in linear time: the
restricted log-likelihood of the trait covariance R and, for every tip, the distribution
of its trait vector given all the other tips, by one pass up and one pass down the tree.

Every node carries a Gaussian message in canonical form (precision matrix, information
vector), p x p per node, so a value missing in any trait is integrated out analytically
(a tip sends precision only for the traits it has); the root value has a flat prior, so
the root is estimated by GLS and its uncertainty is carried into every prediction.

Hassler G, Tolkoff MR, Allen WL, Ho LST, Lemey P, Suchard MA (2019) Inferring phenotypic
trait evolution on large trees with many incomplete measurements. arXiv:1906.03222.
Felsenstein J (1973) Maximum-likelihood estimation of evolutionary trees from continuous
characters. Am J Hum Genet 25:471-492.
Harville DA (1974) Bayesian inference for variance components using only error contrasts.
Biometrika 61:383-385 (the likelihood integrated over a flat prior on the mean is the
restricted likelihood).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from comparo.base.errors import UsageError
from comparo.phylo.flat import FlatTree

_LOG2PI = math.log(2.0 * math.pi)


@dataclass(frozen=True, eq=False)
class _Up:
    S: np.ndarray  # (N, p, p) precision from below at each node
    I: np.ndarray  # noqa: E741 - (N, p) information from below
    u: np.ndarray  # (N, p, p) precision sent up through the edge
    J: np.ndarray  # (N, p) information sent up
    loglik: float  # restricted log-likelihood (flat prior on the root)


def _check(ft: FlatTree, Y: np.ndarray, R: np.ndarray, t: np.ndarray) -> None:
    n, p = Y.shape
    if n != ft.n_tips:
        raise ValueError(f"Y has {n} rows for a tree of {ft.n_tips} tips")
    if R.shape != (p, p):
        raise ValueError(f"R has shape {R.shape} for {p} traits")
    has = np.isfinite(Y).any(axis=1)
    if np.any(~(t[:n][has] > 0)):
        raise UsageError(
            "a tip with a value has an edge of length 0: its variance is 0 (use lambda < 1)"
        )


def _tips(Y: np.ndarray, R: np.ndarray, t: np.ndarray, N: int):
    """Messages the tips send up: for observed traits o, precision (t R_oo)⁻¹ padded with
    zeros, information (t R_oo)⁻¹ y_o, and the log normalising constant."""
    n, p = Y.shape
    u = np.zeros((N, p, p))
    J = np.zeros((N, p))
    const = 0.0
    mask = np.isfinite(Y)
    patterns, which = np.unique(mask, axis=0, return_inverse=True)
    which = np.asarray(which).reshape(-1)
    for k, pat in enumerate(patterns):
        o = np.flatnonzero(pat)
        if o.size == 0:
            continue
        idx = np.flatnonzero(which == k)
        Roo = R[np.ix_(o, o)]
        Ri = np.linalg.inv(Roo)
        ti = t[idx]
        P = Ri[None, :, :] / ti[:, None, None]
        yo = Y[np.ix_(idx, o)]
        info = np.einsum("kij,kj->ki", P, yo)
        u[np.ix_(idx, o, o)] = P
        J[np.ix_(idx, o)] = info
        logdet = np.linalg.slogdet(Roo)[1]
        const += float(
            -0.5 * np.einsum("ki,ki->", yo, info)
            - 0.5 * (idx.size * o.size * _LOG2PI + o.size * np.log(ti).sum() + idx.size * logdet)
        )
    return u, J, const


def up_pass(ft: FlatTree, Y: np.ndarray, R: np.ndarray, edges: np.ndarray | None = None) -> _Up:
    """Post-order pass: precision and information from below at every node, and the
    restricted log-likelihood of the observed values (flat prior on the root value).

    Parameters
    ----------
    ft : FlatTree
    Y : array (n_tips, p)
        Trait values (NaN: missing), rows in the order of ``ft.tips``.
    R : array (p, p)
        Trait covariance per unit branch length (positive definite).
    edges : array (n_nodes,), optional
        Edge lengths (e.g. Pagel's lambda); the tree's own by default.

    Notes
    -----
    A node with (S, I) from below seen through an edge t (V = tR) sends up
    u = (I + SV)⁻¹S and J = (I + SV)⁻¹I, and adds −½ln|I + SV| + ½I'VJ to the
    log-likelihood (the Gaussian integral over the node value; S may be singular).
    At the root, with a flat prior: +(p/2)ln 2π − ½ln|S| + ½I'S⁻¹I.
    """
    Y = np.asarray(Y, dtype=float)
    R = np.asarray(R, dtype=float)
    t = ft.length if edges is None else np.asarray(edges, dtype=float)
    _check(ft, Y, R, t)
    n, p = Y.shape
    N = ft.n_nodes
    u, J, ll = _tips(Y, R, t, N)
    S = np.zeros((N, p, p))
    I = np.zeros((N, p))  # noqa: E741
    eye = np.eye(p)
    bounds = ft.bounds
    top = len(bounds) - 2
    for k in range(top + 1):
        a, b = int(bounds[k]), int(bounds[k + 1])
        if 0 < k < top:
            V = t[a:b, None, None] * R[None]
            M = eye + S[a:b] @ V
            u[a:b] = np.linalg.solve(M, S[a:b])
            J[a:b] = np.linalg.solve(M, I[a:b][..., None])[..., 0]
            ll += float(
                -0.5 * np.linalg.slogdet(M)[1].sum()
                + 0.5 * np.einsum("ki,kij,kj->", I[a:b], V, J[a:b])
            )
        if k < top:
            starts, parents = ft.segments[k]
            S[parents] += np.add.reduceat(u[a:b], starts, axis=0)
            I[parents] += np.add.reduceat(J[a:b], starts, axis=0)
    root = N - 1
    sign, logdet = np.linalg.slogdet(S[root])
    if sign <= 0:
        raise UsageError("the observed values do not determine every trait's root value")
    ll += (
        0.5 * p * _LOG2PI - 0.5 * logdet + 0.5 * float(I[root] @ np.linalg.solve(S[root], I[root]))
    )
    return _Up(S, I, u, J, float(ll))


def restricted_loglik(
    ft: FlatTree, Y: np.ndarray, R: np.ndarray, edges: np.ndarray | None = None
) -> float:
    """The restricted log-likelihood of R: the density of the observed values with the
    root value integrated over a flat prior (Harville 1974), O(n p³)."""
    return up_pass(ft, Y, R, edges).loglik


@dataclass(frozen=True, eq=False)
class TipConditionals:
    """Every tip's trait vector given all the *other* tips' values (its own left out).

    Attributes
    ----------
    mean : array (n_tips, p)
    cov : array (n_tips, p, p)
        Conditional covariance, the root's uncertainty (GLS) included; absolute (R in it).
    root_mean : array (p,)
        GLS root value.
    root_cov : array (p, p)
        Its covariance.
    loglik : float
        Restricted log-likelihood at R.
    """

    mean: np.ndarray
    cov: np.ndarray
    root_mean: np.ndarray
    root_cov: np.ndarray
    loglik: float


def tip_conditionals(
    ft: FlatTree, Y: np.ndarray, R: np.ndarray, edges: np.ndarray | None = None
) -> TipConditionals:
    """Up then down: for each tip, the Gaussian of its traits given every other tip.

    Down pass: the root receives nothing from above (flat prior). A child c of p receives
    from outside its subtree Rm = Q_p + S_p − u_c, K = K_p + I_p − J_c, seen through its
    edge (V = tR): Q_c = (I + Rm V)⁻¹Rm, K_c = (I + Rm V)⁻¹K. At a tip, mean Q⁻¹K and
    covariance Q⁻¹.
    """
    Y = np.asarray(Y, dtype=float)
    R = np.asarray(R, dtype=float)
    t = ft.length if edges is None else np.asarray(edges, dtype=float)
    up = up_pass(ft, Y, R, t)
    n, p = Y.shape
    N = ft.n_nodes
    eye = np.eye(p)
    Q = np.zeros((N, p, p))
    K = np.zeros((N, p))
    bounds = ft.bounds
    top = len(bounds) - 2
    for k in range(top - 1, -1, -1):
        a, b = int(bounds[k]), int(bounds[k + 1])
        par = ft.parent[a:b]
        Rm = Q[par] + up.S[par] - up.u[a:b]
        Km = K[par] + up.I[par] - up.J[a:b]
        M = eye + Rm @ (t[a:b, None, None] * R[None])
        Q[a:b] = np.linalg.solve(M, Rm)
        K[a:b] = np.linalg.solve(M, Km[..., None])[..., 0]
    Qt = 0.5 * (Q[:n] + np.swapaxes(Q[:n], 1, 2))
    cov = np.linalg.inv(Qt)
    mean = np.einsum("kij,kj->ki", cov, K[:n])
    root = N - 1
    root_cov = np.linalg.inv(up.S[root])
    return TipConditionals(mean, cov, root_cov @ up.I[root], root_cov, up.loglik)


def condition_on_own(
    mean: np.ndarray, cov: np.ndarray, Y: np.ndarray, target: int = 0
) -> tuple[np.ndarray, np.ndarray]:
    """Trait *target* of each tip given the other tips (``mean``, ``cov``) **and** the
    tip's own values of the other traits (NaN: not observed): the conditional Gaussian
    m_y + Σ_yo Σ_oo⁻¹(y_o − m_o), variance Σ_yy − Σ_yo Σ_oo⁻¹ Σ_oy. Returns (mean, var)."""
    n, p = Y.shape
    own = np.isfinite(Y)
    own[:, target] = False
    m = mean[:, target].copy()
    v = cov[:, target, target].copy()
    patterns, which = np.unique(own, axis=0, return_inverse=True)
    which = np.asarray(which).reshape(-1)
    for k, pat in enumerate(patterns):
        o = np.flatnonzero(pat)
        if o.size == 0:
            continue
        idx = np.flatnonzero(which == k)
        Soo = cov[np.ix_(idx, o, o)]
        Syo = cov[idx][:, target, o]
        w = np.linalg.solve(Soo, Syo[..., None])[..., 0]  # Σ_oo⁻¹ Σ_oy
        m[idx] += np.einsum("ki,ki->k", w, Y[np.ix_(idx, o)] - mean[np.ix_(idx, o)])
        v[idx] -= np.einsum("ki,ki->k", w, Syo)
    return m, v


def _chol_params(R: np.ndarray) -> np.ndarray:
    L = np.linalg.cholesky(R)
    p = R.shape[0]
    L[np.diag_indices(p)] = np.log(np.diag(L))
    return L[np.tril_indices(p)]


def _from_params(theta: np.ndarray, p: int) -> np.ndarray:
    L = np.zeros((p, p))
    L[np.tril_indices(p)] = theta
    L[np.diag_indices(p)] = np.exp(np.diag(L))
    return L @ L.T


def fit_trait_covariance(
    ft: FlatTree, Y: np.ndarray, edges: np.ndarray | None = None
) -> tuple[np.ndarray, float]:
    """R by restricted maximum likelihood (REML; the root integrated over a flat prior),
    missing values integrated out: a quasi-Newton search (scipy L-BFGS-B) over the
    Cholesky factor of R (log diagonal), from the per-trait REML rates with zero
    correlation. Returns (R, restricted log-likelihood at R); O(n p³) per evaluation."""
    from scipy.optimize import minimize

    Y = np.asarray(Y, dtype=float)
    n, p = Y.shape
    t = ft.length if edges is None else np.asarray(edges, dtype=float)
    start = np.zeros((p, p))
    for j in range(p):
        if int(np.isfinite(Y[:, j]).sum()) < 2:
            raise UsageError(f"trait {j} has fewer than 2 values: its rate cannot be estimated")
        start[j, j] = _univariate_rate(ft, Y[:, j], t)

    def nll(theta: np.ndarray) -> float:
        try:
            return -restricted_loglik(ft, Y, _from_params(theta, p), t)
        except (np.linalg.LinAlgError, UsageError):
            return 1e300

    theta0 = _chol_params(start)
    res = minimize(nll, theta0, method="L-BFGS-B", options={"ftol": 1e-13, "gtol": 1e-8})
    R = _from_params(res.x, p)
    return R, -float(res.fun)


def _univariate_rate(ft: FlatTree, y: np.ndarray, t: np.ndarray) -> float:
    """REML rate of one trait: RSS_GLS/(n_o − 1) from the same passes with R = 1."""
    up = up_pass(ft, y[:, None], np.ones((1, 1)), t)
    up2 = up_pass(ft, y[:, None], np.full((1, 1), 2.0), t)
    m = int(np.isfinite(y).sum()) - 1
    # loglik(s) = c − (m/2) ln s − RSS/(2s): two values give RSS
    rss = 4.0 * ((up2.loglik - up.loglik) + 0.5 * m * math.log(2.0))
    return max(rss / m, 1e-12)
