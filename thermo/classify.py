"""Structure of a point-vortex configuration: dipoles, like-sign clusters, free vortices.

Classification rule (Reeves, Billam, Anderson & Bradley, PRL 110, 104501 (2013),
supplemental material; the rule is reproduced here *from memory*):

1. Two vortices of opposite sign that are each other's nearest neighbour (among all
   vortices) form a dipole.
2. Among the vortices not in dipoles, two like-sign vortices are joined when they are
   closer to each other than either of them is to any vortex of opposite sign
   (dipole members included). Clusters are the connected components of size >= 2
   of this "joined" graph.
3. Everything else is free.

A single-species gas has no opposite-sign vortex, so by rule 2 all its vortices form
one cluster; that is what the published rule implies and is kept on purpose.

Besides the labels this module gives the scalar observables used as clustering
order parameters (dipole moment D, nearest-neighbour sign correlation C1, signed
angular impulse M, mean nearest-neighbour distance) and the sign-resolved pair
correlation functions of an ensemble.

Positions are dimensionless (scaled by the domain size, disk radius 1); signs +-1.
All functions are vectorised over an ensemble axis ``S`` where it helps.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import connected_components

from thermo.errors import ConfigurationError

FREE = 0
DIPOLE = 1
CLUSTER = 2
LABEL_NAMES = {FREE: "free", DIPOLE: "dipole", CLUSTER: "cluster"}

# Distance matrices are built for a block of configurations at a time so that
# memory stays below ~50 MB for large ensembles (S * N * N * 8 bytes).
_BLOCK_ELEMENTS = 6_000_000


@dataclass(frozen=True)
class Classification:
    """Labels of one configuration.

    Attributes
    ----------
    labels : (N,) int8 array, FREE = 0, DIPOLE = 1, CLUSTER = 2.
    cluster_id : (N,) int64 array, cluster index 0..n_clusters-1, -1 if not clustered.
    dipole_partner : (N,) int64 array, index of the dipole partner, -1 if none.
    n_clusters : number of like-sign clusters.
    dipole_fraction, cluster_fraction, free_fraction : fractions of the N vortices.

    Units: dimensionless.
    """

    labels: np.ndarray
    cluster_id: np.ndarray
    dipole_partner: np.ndarray
    n_clusters: int
    dipole_fraction: float
    cluster_fraction: float
    free_fraction: float


def _as_batch(positions: Any, signs: Any) -> tuple[np.ndarray, np.ndarray, bool]:
    """Validate and promote positions to (S, N, 2); signs to (N,) float."""
    pos = np.asarray(positions, dtype=np.float64)
    single = pos.ndim == 2
    if single:
        pos = pos[None]
    if pos.ndim != 3 or pos.shape[-1] != 2:
        raise ConfigurationError(
            f"positions must have shape (N, 2) or (S, N, 2); got {np.shape(positions)}")
    s = np.asarray(signs)
    if s.ndim != 1 or s.shape[0] != pos.shape[1]:
        raise ConfigurationError(
            f"signs must have shape (N,) = ({pos.shape[1]},); got {s.shape}")
    if not np.all(np.isin(s, (-1, 1))):
        raise ConfigurationError("signs must be +1 or -1 (found other values)")
    if not np.all(np.isfinite(pos)):
        raise ConfigurationError("positions contain NaN or infinity")
    return pos, s.astype(np.float64), single


def _distance_block(pos: np.ndarray) -> np.ndarray:
    """Pair distances (S, N, N) with +inf on the diagonal."""
    diff = pos[:, :, None, :] - pos[:, None, :, :]
    d = np.sqrt(np.einsum("sijk,sijk->sij", diff, diff))
    n = pos.shape[1]
    d[:, np.arange(n), np.arange(n)] = np.inf
    return d


def _blocks(n_conf: int, n_vort: int):
    step = max(1, _BLOCK_ELEMENTS // max(1, n_vort * n_vort))
    for start in range(0, n_conf, step):
        yield slice(start, min(n_conf, start + step))


def _labels_from_distances(d: np.ndarray, s: np.ndarray):
    """Dipole partners and the cluster adjacency for a block of configurations.

    Returns (partner (S,N) int64 with -1, joined (S,N,N) bool).
    """
    n_conf, n = d.shape[:2]
    nn = np.argmin(d, axis=2)                                   # (S, N)
    idx = np.arange(n)
    mutual = np.take_along_axis(nn, nn, axis=1) == idx[None, :]
    opposite = s[nn] != s[None, :]
    is_dipole = mutual & opposite
    partner = np.where(is_dipole, nn, -1)

    same = s[:, None] == s[None, :]                              # (N, N)
    d_opp = np.where(~same[None], d, np.inf).min(axis=2)         # (S, N)
    free_of_dipole = ~is_dipole
    joined = (same[None]
              & (d < d_opp[:, :, None]) & (d < d_opp[:, None, :])
              & free_of_dipole[:, :, None] & free_of_dipole[:, None, :])
    return partner, joined


def classify(positions: Any, signs: Any) -> Classification:
    """Label the vortices of one configuration as dipole, cluster or free.

    Parameters
    ----------
    positions : (N, 2) array of scaled positions.
    signs : (N,) array of +1 / -1.

    Returns
    -------
    Classification

    Units: positions in units of the domain size; the result is dimensionless.
    """
    pos, s, _ = _as_batch(positions, signs)
    if pos.shape[0] != 1:
        raise ConfigurationError("classify takes one configuration; use classify_batch")
    n = pos.shape[1]
    if n < 2:
        raise ConfigurationError("classification needs at least two vortices")
    partner, joined = _labels_from_distances(_distance_block(pos), s)
    partner, joined = partner[0], joined[0]
    n_comp, comp = connected_components(csr_matrix(joined), directed=False)
    sizes = np.bincount(comp, minlength=n_comp)
    in_cluster = (sizes[comp] >= 2) & (partner < 0)
    # renumber the clusters 0..n_clusters-1 in order of first appearance
    cluster_id = np.full(n, -1, dtype=np.int64)
    uniq = np.unique(comp[in_cluster])
    remap = {c: k for k, c in enumerate(uniq)}
    for i in np.flatnonzero(in_cluster):
        cluster_id[i] = remap[comp[i]]
    labels = np.full(n, FREE, dtype=np.int8)
    labels[partner >= 0] = DIPOLE
    labels[in_cluster] = CLUSTER
    return Classification(
        labels=labels, cluster_id=cluster_id, dipole_partner=partner.astype(np.int64),
        n_clusters=len(uniq),
        dipole_fraction=float(np.mean(labels == DIPOLE)),
        cluster_fraction=float(np.mean(labels == CLUSTER)),
        free_fraction=float(np.mean(labels == FREE)))


def classify_batch(positions: Any, signs: Any) -> np.ndarray:
    """Labels for an ensemble of configurations with common signs.

    A vortex is in a cluster iff it is joined to at least one like-sign vortex, so
    the per-vortex labels do not need the connected components; this keeps the
    ensemble version fully vectorised.

    Parameters
    ----------
    positions : (S, N, 2) array (or (N, 2)).
    signs : (N,) array of +1 / -1.

    Returns
    -------
    labels : (S, N) int8 array (FREE, DIPOLE, CLUSTER).

    Units: dimensionless.
    """
    pos, s, _ = _as_batch(positions, signs)
    n_conf, n = pos.shape[:2]
    labels = np.zeros((n_conf, n), dtype=np.int8)
    if n < 2:
        return labels
    for blk in _blocks(n_conf, n):
        partner, joined = _labels_from_distances(_distance_block(pos[blk]), s)
        lab = np.where(joined.any(axis=2), CLUSTER, FREE)
        lab[partner >= 0] = DIPOLE
        labels[blk] = lab
    return labels


def structure_observables(positions: Any, signs: Any) -> dict[str, np.ndarray]:
    """Clustering observables of each configuration of an ensemble.

    .. math::
        D = |\\sum_i s_i u_i| / N, \\quad C_1 = \\frac{1}{N}\\sum_i s_i s_{nn(i)},
        \\quad M = \\sum_i s_i |u_i|^2

    Parameters
    ----------
    positions : (S, N, 2) or (N, 2) array of scaled positions.
    signs : (N,) array of +1 / -1.

    Returns
    -------
    dict of (S,) float arrays: ``dipole_moment`` (D), ``c1``, ``angular_impulse`` (M),
    ``mean_nn_distance``, ``dipole_fraction``, ``cluster_fraction``, ``free_fraction``.
    For a single configuration the arrays have length 1.

    Units: D, distances in units of the domain size; M in (domain size)^2; C1 and the
    fractions dimensionless.
    """
    pos, s, _ = _as_batch(positions, signs)
    n_conf, n = pos.shape[:2]
    if n < 2:
        raise ConfigurationError("structure observables need at least two vortices")
    out = {k: np.empty(n_conf) for k in (
        "dipole_moment", "c1", "angular_impulse", "mean_nn_distance",
        "dipole_fraction", "cluster_fraction", "free_fraction")}
    out["dipole_moment"][:] = np.linalg.norm(np.einsum("i,sik->sk", s, pos), axis=1) / n
    out["angular_impulse"][:] = np.einsum("i,si->s", s, np.einsum("sik,sik->si", pos, pos))
    for blk in _blocks(n_conf, n):
        d = _distance_block(pos[blk])
        nn = np.argmin(d, axis=2)
        out["c1"][blk] = np.mean(s[None, :] * s[nn], axis=1)
        out["mean_nn_distance"][blk] = np.mean(np.min(d, axis=2), axis=1)
        partner, joined = _labels_from_distances(d, s)
        lab = np.where(joined.any(axis=2), CLUSTER, FREE)
        lab[partner >= 0] = DIPOLE
        out["dipole_fraction"][blk] = np.mean(lab == DIPOLE, axis=1)
        out["cluster_fraction"][blk] = np.mean(lab == CLUSTER, axis=1)
        out["free_fraction"][blk] = np.mean(lab == FREE, axis=1)
    return out


@dataclass(frozen=True)
class PairCorrelation:
    """Sign-resolved pair correlation functions of an ensemble.

    Attributes
    ----------
    r_edges : (B+1,) bin edges; r : (B,) bin centres.
    g_like, g_opposite : (B,) g_{++}(r) (like-sign pairs, ++ and -- pooled) and g_{+-}(r).
    g_like_err, g_opposite_err : (B,) Poisson standard errors (counts only; the
        configurations of a Markov chain are correlated, so these are lower bounds).

    Units: r in units of the domain size; g dimensionless (1 for uncorrelated
    uniform positions in the same domain).
    """

    r_edges: np.ndarray
    r: np.ndarray
    g_like: np.ndarray
    g_opposite: np.ndarray
    g_like_err: np.ndarray
    g_opposite_err: np.ndarray


def pair_correlation(positions: Any, signs: Any, domain: Any, bins: int = 30,
                     r_max: float | None = None, rng: np.random.Generator | None = None,
                     n_reference: int = 400_000) -> PairCorrelation:
    """g_{++}(r) and g_{+-}(r) of an ensemble, normalised against uniform positions.

    The reference is the distance distribution of two independent uniform points in
    the same domain, estimated from ``n_reference`` sampled pairs. Normalising by it
    (instead of by 2 pi r dr) takes care of the boundary: g = 1 for an ideal gas at
    every r, including r comparable with the domain size.

    Parameters
    ----------
    positions : (S, N, 2) scaled positions; signs : (N,) +-1.
    domain : object with ``sample_uniform(rng, n) -> (n, 2)`` (a thermo.domains.base.Domain).
    bins : number of distance bins; r_max : largest distance (default: the largest
        reference distance); rng : generator for the reference sample.
    n_reference : number of uniform pairs for the reference histogram.

    Returns
    -------
    PairCorrelation

    Units: r in units of the domain size; g dimensionless.
    """
    pos, s, _ = _as_batch(positions, signs)
    n_conf, n = pos.shape[:2]
    if n < 2:
        raise ConfigurationError("pair correlations need at least two vortices")
    rng = np.random.default_rng() if rng is None else rng
    a = np.asarray(domain.sample_uniform(rng, n_reference), dtype=np.float64)
    b = np.asarray(domain.sample_uniform(rng, n_reference), dtype=np.float64)
    d_ref = np.linalg.norm(a - b, axis=1)
    r_max = float(d_ref.max()) if r_max is None else float(r_max)
    edges = np.linspace(0.0, r_max, bins + 1)
    ref_counts = np.histogram(d_ref, edges)[0].astype(np.float64)
    p_ref = ref_counts / n_reference

    iu, ju = np.triu_indices(n, k=1)
    like = s[iu] == s[ju]
    counts_like = np.zeros(bins)
    counts_opp = np.zeros(bins)
    for blk in _blocks(n_conf, n):
        diff = pos[blk][:, iu, :] - pos[blk][:, ju, :]
        d = np.sqrt(np.einsum("spk,spk->sp", diff, diff))
        counts_like += np.histogram(d[:, like], edges)[0]
        counts_opp += np.histogram(d[:, ~like], edges)[0]

    def _norm(counts: np.ndarray, n_pairs: int):
        with np.errstate(invalid="ignore", divide="ignore"):
            expected = p_ref * n_pairs * n_conf
            g = np.where(expected > 0, counts / expected, np.nan)
            err = np.where(expected > 0, np.sqrt(counts) / expected, np.nan)
        return g, err

    g_like, e_like = _norm(counts_like, int(like.sum()))
    g_opp, e_opp = _norm(counts_opp, int((~like).sum()))
    return PairCorrelation(r_edges=edges, r=0.5 * (edges[1:] + edges[:-1]),
                           g_like=g_like, g_opposite=g_opp,
                           g_like_err=e_like, g_opposite_err=e_opp)
