"""The level-wise search over column sets, pruned exactly by the refinement bounds.

Column sets are taken in ``combinations`` order, depth by depth. A set is visited only when every
one of its sub-sets (one column fewer) was visited and some slice of it is still a *candidate*: each
of its parents survived and has a bound reaching the current cut (the ``pool``-th best score so far).
The sets that can still be visited are counted ahead in windows (one
:class:`~probe.slices.counter.SliceCounter` call each), then visited one by one in that order, so the
cut a set is checked against only rises.
"""

from __future__ import annotations

from itertools import combinations
from typing import NamedTuple

import numpy as np

from .bounds import Scorer
from .counter import SliceCounter

__all__ = ["Candidate", "Lattice"]

_EPS = 1e-12  # slack on the bound test: a refinement tied with the cut is still searched
_WINDOW_CELLS = 1 << 20  # slice counts held at once: column sets are counted this far ahead


class Candidate(NamedTuple):
    """One slice the search ranked: its score on the rows searched, its columns (indices into the
    encoding), their levels, and its rows."""

    score: float
    cols: tuple
    levels: tuple
    search_rows: int


class _Node(NamedTuple):
    """A column set to visit: its columns, its slices' shape, and per parent ``(parent columns,
    the parent's key of each slice)``."""

    cols: tuple
    dims: tuple
    parents: tuple


class Lattice:
    """The best ``pool`` eligible slices of the rows searched, by score.

    Parameters
    ----------
    codes : sequence of 1-D integer arrays
        One array of codes per encoded column, over the rows searched.
    n_levels : sequence of int
    y : ndarray
        The outcome over those rows, oriented so that higher is worse (uint8 when ``binary``).
    binary : bool
    depth : int
        Most predicates per slice.
    min_rows : int
        Least rows a slice needs.
    pool : int
        How many of the best slices to keep.
    confidence_level : float
        The nominal level (the within-parent limits).
    score_level : float
        The scores' level (:func:`~probe.slices.bounds.search_level`).
    max_share : float
        Slices over this share of the rows are expanded but not scored.
    prune : bool, default=True
        Skip slices whose bound misses the cut. ``False`` scores every supported slice of every set
        visited (the no-split multiplicity counts them all, so it must not depend on ``pool``).
    weights : ndarray, optional
        Positive row weights (a design that is not plain): weighted rates and effective counts
        (:mod:`~probe.slices.bounds`); None for the plain counts.

    Examples
    --------
    >>> import numpy as np
    >>> r = np.random.default_rng(0)
    >>> codes = [r.integers(0, 3, 5000).astype(np.uint8), r.integers(0, 2, 5000).astype(np.uint8)]
    >>> y = (r.random(5000) < np.where((codes[0] == 1) & (codes[1] == 0), 0.5, 0.1)).astype(np.uint8)
    >>> ranked, n_scored, n_candidates = Lattice(codes, [3, 2], y, True, depth=2, min_rows=30,
    ...                                          pool=3, confidence_level=0.95, score_level=0.99,
    ...                                          max_share=0.5).run()
    >>> ranked[0].cols, ranked[0].levels
    ((0, 1), (1, 0))
    """

    def __init__(self, codes, n_levels, y, binary, *, depth, min_rows, pool, confidence_level,
                 score_level, max_share, prune=True, weights=None):
        self.n_levels = n_levels
        self.n_cols = len(codes)
        self.depth = depth
        self.pool = pool
        self.prune = prune
        # a 0/1 outcome's search ranks on the table's design effect (the Scorer's notes): no w^2
        self.counter = SliceCounter(codes, n_levels, y, binary, weights, squares=not binary)
        self.scorer = Scorer(y, binary, min_rows, confidence_level, score_level, max_share,
                             weights)
        self.visited = {}  # cols -> (score, bound, candidate, stats), arrays over the set's keys
        self.best = []  # sorted (rank key, Candidate), best first, at most `pool`
        self.n_scored = 0  # supported slices scored (within the share cap)
        self.n_candidates = 0  # slices whose every parent survived: the ones not pruned

    def run(self):
        """Search every depth; returns ``(ranked, n_scored, n_candidates)``, ``ranked`` a list of
        :class:`Candidate`, best first."""
        for d in range(1, self.depth + 1):
            for window in self.windows(d):
                self.score_window(window, d)
        return [entry for _, entry in self.best], self.n_scored, self.n_candidates

    def threshold(self) -> float:
        """The current cut: the ``pool``-th best score (``-inf`` until the pool is full)."""
        return self.best[-1][1].score if self.prune and len(self.best) >= self.pool else -np.inf

    def windows(self, d):
        """The column sets of size ``d`` that can still be visited, in windows of at most
        ``_WINDOW_CELLS`` counts; a generator, so each set is checked against the cut as it stands
        after the windows before it were scored."""
        window, cells = [], 0
        for cols in combinations(range(self.n_cols), d):
            node = self.node(cols)
            if node is None:
                continue
            size = self.counter.cells(cols)
            if window and cells + size > _WINDOW_CELLS:
                yield window
                window, cells = [], 0
            window.append(node)
            cells += size
        if window:
            yield window

    def node(self, cols) -> _Node | None:
        """``cols`` with its parents, or None when a parent was not visited or no slice of it is a
        candidate (the cut only rises, so a set with no candidate now has none when visited)."""
        dims = tuple(self.n_levels[c] for c in cols)
        d = len(cols)
        if d == 1:
            return _Node(cols, dims, ())
        subsets = [cols[:i] + cols[i + 1:] for i in range(d)]
        if any(s not in self.visited for s in subsets):
            return None
        levels = np.unravel_index(np.arange(int(np.prod(dims))), dims)
        parents = tuple(
            (s, np.ravel_multi_index(levels[:i] + levels[i + 1:], dims[:i] + dims[i + 1:]))
            for i, s in enumerate(subsets)
        )
        if not self.candidates(dims, parents).any():
            return None
        return _Node(cols, dims, parents)

    def candidates(self, dims, parents) -> np.ndarray:
        """Per slice: every parent survived and its bound still reaches the cut."""
        thr = self.threshold()
        cand = np.ones(int(np.prod(dims)), dtype=bool)
        for s, pk in parents:
            _, p_bound, p_cand, _ = self.visited[s]
            cand &= p_cand[pk] & (p_bound[pk] >= thr - _EPS)
        return cand

    def score_window(self, window, d):
        """Count a window's column sets, score them in one vectorised call, then visit each."""
        stats = self.counter.count([node.cols for node in window])
        scored, bounds = self.scorer.window([stats[node.cols] for node in window], d < self.depth)
        for node, (supported, score), bound in zip(window, scored, bounds):
            self.visit(node, stats[node.cols], supported, score, bound)

    def visit(self, node, st, supported, score_all, bound_all):
        """Record a column set's scores and bounds (for its refinements) and merge its eligible
        slices into the pool."""
        size = len(supported)
        if node.parents:
            cand = self.candidates(node.dims, node.parents)
            if not cand.any():
                return
        else:
            cand = np.ones(size, dtype=bool)
        self.n_scored += int((supported & ~self.scorer.capped(st)).sum())
        ok = supported & cand
        self.n_candidates += int(ok.sum())
        score = np.where(ok, score_all, -np.inf)
        bound = np.full(size, -np.inf) if bound_all is None else np.where(ok, bound_all, -np.inf)
        self.visited[node.cols] = (score, bound, ok, st)
        # only slices reaching the cut can enter the pool: eligibility is checked on those alone
        keys = np.flatnonzero(ok & np.isfinite(score) & (score >= self.threshold()))
        if len(keys):
            keys = self.eligible(node, st, keys)
        if len(keys):
            self.merge(node, keys, score, st[0])

    def eligible(self, node, st, keys) -> np.ndarray:
        """The slices of ``keys`` that are eligible: a depth-1 slice is worse than the rest; a
        refinement is material (see the package notes)."""
        if not node.parents:
            return keys[self.scorer.gap(tuple(a[keys] for a in st)) > 0]
        # confidently worse than the rest of each parent (the parent's other rows), so an extra
        # predicate that only carves a lucky corner out of a bad region is dropped
        for s, pk in node.parents:
            if not len(keys):
                break
            sub = tuple(a[keys] for a in st)
            keys = keys[self.scorer.within_parent(sub, self.visited[s][3], pk[keys]) > 0]
        return keys

    def merge(self, node, keys, score, n):
        """Add the slices ``keys`` of a column set to the pool and keep its best ``pool`` (rank:
        score, then depth, columns and levels)."""
        pool = self.pool
        if len(keys) > pool:  # keep the pool best, with every tie at the cut
            cut = np.sort(score[keys])[-pool]
            keys = keys[score[keys] >= cut]
        d = len(node.cols)
        levels = np.unravel_index(keys, node.dims)
        for j, k in enumerate(keys):
            lv = tuple(int(level[j]) for level in levels)
            entry = Candidate(float(score[k]), node.cols, lv, int(n[k]))
            self.best.append(((-entry.score, d, node.cols, lv), entry))
        self.best.sort(key=lambda t: t[0])
        del self.best[pool:]
