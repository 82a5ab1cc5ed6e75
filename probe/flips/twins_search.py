"""The twins' nearest-neighbour searches (:mod:`.twins` says what they serve): chunked k-NN queries,
the other group's twins (in the whole group and a size-matched subsample of it, also when a row of
uncertain membership belongs to both groups), the own-group twins with the person excluded, and the
outcomes a person's twins give."""

from __future__ import annotations

import numpy as np
from scipy import stats as _sps

from ..threads import N_JOBS, limited

__all__ = ["kneighbors", "cross_twins", "cross_excluding", "own_twins", "twin_outcomes"]

_TWIN_CHUNK = 20_000   # query rows per nearest-neighbour call
_KD_TREE_MAX_DIM = 8   # above this many encoded dimensions, brute (chunked) search is faster


def kneighbors(pool, queries, n_neighbors) -> np.ndarray:
    """Positions in ``pool`` of each query row's ``n_neighbors`` nearest, nearest first; queried in
    chunks so memory stays bounded (never a queries x pool matrix)."""
    from sklearn.neighbors import NearestNeighbors

    # a k-d tree wins in few dimensions; beyond that sklearn's brute search (computed in chunks
    # under its working-memory bound, never an n x n matrix) is several times faster
    algorithm = "kd_tree" if pool.shape[1] <= _KD_TREE_MAX_DIM else "brute"
    out = np.empty((len(queries), n_neighbors), dtype=np.int64)
    with limited():
        nn = NearestNeighbors(n_neighbors=n_neighbors, algorithm=algorithm,
                              n_jobs=N_JOBS).fit(pool)
        for start in range(0, len(queries), _TWIN_CHUNK):
            stop = min(start + _TWIN_CHUNK, len(queries))
            out[start:stop] = nn.kneighbors(queries[start:stop], return_distance=False)
    return out


def _query_depth(k, p, n) -> int:
    """How many neighbours in the full pool to ask for so that, with probability at least 0.999,
    ``k`` of them fall in a random subsample holding a share ``p`` of it."""
    depth = k
    while depth < n and _sps.binom.sf(k - 1, depth, p) < 0.999:
        depth += 1
    return depth


def cross_twins(Zt, Zs, k, sub):
    """The ``k`` nearest other-group twins of each source row: in the whole group (positions in
    ``Zt``) and in the subsample ``sub`` (positions in ``sub``; the same array when ``sub`` is
    None)."""
    if sub is None:
        nb = kneighbors(Zt, Zs, k)
        return nb, nb
    p = len(sub) / len(Zt)
    if p < 0.5:  # a small subsample: its own search is cheap
        return kneighbors(Zt, Zs, k), kneighbors(Zt[sub], Zs, k)
    # most of the group is kept: one deeper search in the whole group serves both; the nearest k
    # of it that lie in the subsample are its nearest k there (rows short of k are searched again)
    full = kneighbors(Zt, Zs, _query_depth(k, p, len(Zt)))
    pos = np.full(len(Zt), -1, dtype=np.int64)
    pos[sub] = np.arange(len(sub))
    in_sub = pos[full]
    hit = in_sub >= 0
    order = np.argsort(~hit, axis=1, kind="stable")[:, :k]
    matched = np.take_along_axis(in_sub, order, axis=1)
    short = np.flatnonzero(hit.sum(axis=1) < k)
    if len(short):
        matched[short] = kneighbors(Zt[sub], Zs[short], k)
    return full[:, :k], matched


def own_twins(Zs, k, m, gen) -> np.ndarray:
    """Each source row's ``k`` nearest other members of its own group (positions in ``Zs``), drawn
    from a pool of ``m`` others: all of the group when it has ``m + 1`` rows, else a random
    ``m + 1`` of them (a row outside that subsample draws from all ``m + 1``, one more; immaterial).

    Asks for ``k + 1`` and drops the row itself; when exact duplicates crowd it out of its own
    ``k + 1`` nearest, the farthest is dropped instead."""
    n = len(Zs)
    pool = np.sort(gen.choice(n, m + 1, replace=False)) if n - 1 > m else np.arange(n)
    pos = np.full(n, -1, dtype=np.int64)
    pos[pool] = np.arange(len(pool))
    nb = kneighbors(Zs[pool] if len(pool) < n else Zs, Zs, k + 1)
    return pool[_drop_self(nb, nb == pos[:, None], k)]


def _drop_self(nb, is_self, k):
    """The ``k`` of ``k + 1`` neighbours left when the person is dropped (the farthest when the
    person is not among them)."""
    n = len(nb)
    drop = np.where(is_self.any(axis=1), is_self.argmax(axis=1), k)
    keep = np.ones(nb.shape, dtype=bool)
    keep[np.arange(n), drop] = False
    return nb[keep].reshape(n, k)


def cross_excluding(Zt, Zs, k, idx, tgt):
    """Cross-group twins when a row can be in both groups (uncertain membership): ``k + 1``
    nearest of the other group's pool, the person themself dropped."""
    if len(Zt) <= k:
        return kneighbors(Zt, Zs, k)
    nb = kneighbors(Zt, Zs, k + 1)
    return _drop_self(nb, tgt[nb] == idx[:, None], k)


def twin_outcomes(own_fav, fav, base, twin_rows, vote=None):
    """Per person: (twins favourable by majority and the person not, the reverse, twins' mean
    score); a tie among an even number of twins counts as no difference. ``vote`` (uncertain
    membership) weights each twin by its probability of belonging to the pool's group."""
    if vote is None:
        share = fav[twin_rows].mean(axis=1)
        score = base[twin_rows].mean(axis=1)
    else:
        v = vote[twin_rows]
        share = (v * fav[twin_rows]).sum(axis=1) / v.sum(axis=1)
        score = (v * base[twin_rows]).sum(axis=1) / v.sum(axis=1)
    return ~own_fav & (share > 0.5), own_fav & (share < 0.5), score
