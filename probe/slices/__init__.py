"""The slice search: where the model fails, with honest intervals.

A *slice* is a conjunction of one to ``depth`` predicates on encoded columns (``district = Harrowmere
and utilisation >= 0.75``). For a per-row outcome over a base population (an error, a false positive
among the label-negatives, a miss among the label-positives, a favourable decision; see
:mod:`probe.metrics`) the search looks for the slices whose rate is worst compared with the rest of
the base population. Its options are :class:`probe.options.SliceOptions`.

How it works
------------
1. **Encoding.** Every candidate column becomes small integer codes (:mod:`probe.encode`), or the
   caller passes the run's :class:`~probe.encode.Encoding`.
2. **Split** (:mod:`.search`). By default the base rows are split, seeded and stratified by the label,
   into a *search* half and an *estimate* half. Not by the outcome: fixing the outcome's total in each
   part makes a slice's counts in the two parts negatively dependent, so the estimate part's intervals
   would over-cover (96.5 % for a nominal 95 % in our simulation).
3. **Search** (:mod:`.lattice`, on the search part). For one column set all its slices are counted in
   one pass (:mod:`.counter`): the columns' codes are combined into one integer key and a weighted
   bincount (:func:`probe.counting.weighted_bincount`) gives every slice's rows and events. Several
   column sets share one pass: the codes of a few columns together (up to 8,192 joint cells) are
   counted at once and each set inside them is a sum over the other columns of that small table, so
   the depth-3 benchmark in tests/perf (15 columns) makes 87 passes over the rows, not 575. Column sets
   are visited level by level (depth 1, 2, 3, ...), a set only when every one of its sub-sets was
   visited and some slice of it survived. The **score** of a slice (:mod:`.bounds`) is the lower
   confidence bound of its gap to the rest (Newcombe's interval for 0/1 outcomes, a Wald interval
   for real-valued ones), in the metric's bad direction, at the *search level*: the confidence
   level Bonferroni-adjusted over every slice the lattice can hold (known from the levels and the
   depth before searching), so a large, solid slice beats a small lucky corner. Slices holding more
   than ``max_share`` of the rows are not scored (slices are sub-groups) but are expanded. A slice
   **survives** (is expanded) only if an optimistic bound on the score of any refinement still
   reaches the current pool's worst score: a refinement of a slice with ``n`` rows and ``x``
   events has ``n' >= min_rows`` rows and ``x' <= min(x, n')`` events, and since Newcombe's lower
   limit is at most ``wilson_low(x', n') - (X - x') / (N - n')`` at any level, which is largest at
   ``n' = clip(x, min_rows, n)``, ``x' = min(x, n')``, that value bounds every refinement.
   Pruning is therefore exact: the result equals exhaustive enumeration.
4. **Redundancy.** A depth-1 slice must be worse than the rest (positive gap); a refinement counts
   only if it is confidently worse than the rest of each slice it refines (one predicate fewer):
   the lower limit of its rate minus the rate of the parent's other rows (Newcombe or Wald, at the
   nominal level) is above zero, so a predicate that carves a lucky corner out of a region that
   is bad as a whole adds nothing. Among the best ``2 * pool`` slices, near-identical row sets
   (Jaccard similarity >= ``similarity`` on the estimate-part rows) are kept once, the
   higher-ranked one, and the first ``pool = max(50, 5 * top)`` remaining are *carried* to the
   estimate stage.
5. **Estimate** (:mod:`.estimate`, on the estimate part only). Rate (Wilson), gap to the rest
   (Newcombe), the ratio to the rest (MOVER-R); for a real-valued outcome Wald rates and Welch
   gaps. The one-sided p-value (:mod:`.pvalues`) is exact for a 0/1 outcome (Fisher's, from the
   hypergeometric tail), the conditional exact test for a {-1, 0, 1} outcome and Welch's t
   otherwise; the q-values are weighted Benjamini–Hochberg over the carried slices (weights
   proportional to 1 / the search part's rank, averaging 1: Genovese, Roeder & Wasserman 2006). That multiplicity is valid because which slices were carried depends only on
   the search part (and on estimate-part row *membership*, not outcomes), so on the estimate part
   they are a fixed family (``SliceFindings.family``). The **list** (:mod:`.listing`) holds the
   carried slices worse than the rest on the estimate part, ordered by the gap's lower limit there
   at the report's level, each adding rows that are still worse than the rows in none of the
   slices above it, or worse than the listed rows it does not hold; at most ``top``. When none has q <= 1 - confidence level, a note says the list holds candidates
   (``SliceFindings.significant`` is 0).
   With ``split=False`` (small data) everything is computed on all rows and the multiplicity is every
   slice scored during the search: all slices meeting ``min_rows`` (within the share cap) in every
   column set visited, counted exactly; BH uses that ``m`` with the p-values of the slices not
   carried set to 1 (conservative). Nothing is pruned then, so the count, and every q-value, does
   not depend on ``top``. The listed estimates then come from the rows that chose the slices and
   are overstated (``SliceFindings.selected``); every renderer says so.
6. **Bootstrap** (``interval="bootstrap"``): the estimate-part rows are resampled (multinomial) for all
   carried slices at once; because a slice's rate and gap depend on its rows only through the counts of
   (inside/outside the slice) x (outcome value) cells, the resample is drawn on those cells, which is the
   same distribution as resampling rows, without a loop per resample. BCa (with the cell-wise
   jackknife) where defined, else the percentile interval; the method is recorded in each estimate.

7. **Design** (``sample_weight=`` or ``design=``, :mod:`probe.design`; :mod:`.sample`,
   :mod:`.estimate_design`). A plain design (weights 0/1, no clusters, memberships 0/1) takes the
   unweighted path exactly (rows of weight 0 left out). Otherwise the counts are weighted: the
   search ranks on weighted rates with effective counts (for a 0/1 outcome each slice's rows over
   the table's Kish design effect, from additive sums; the bound allows for the lightest row, so
   it stays exact), ``min_rows`` counts rows and
   ``max_share`` the weighted share; the split draws whole clusters (a simple random split of
   clusters, not stratified by the label); the estimate part's rates, gaps and ratios take the
   effective counts of :func:`probe.design.effective_counts` (clusters, or a membership row's
   copies, as units) and record ``n_effective``; the p-value is the pooled score test on the effective counts
   (referred to Student's t, the slice's effective rows less one) (Fisher's exact test is not exact under weights; its level is measured in
   ``tests/sim/sim_slices.py``, ``weighted_level``); the bootstrap resamples units. An attribute
   known as membership probabilities is a slice column: its rows are expanded, a copy per group
   with weight ``w * pi``.

This is a statistical screen, not a legal finding: a slice with a large gap points where to look. The
four-fifths rule is a rule of thumb; defer to counsel, local law and licensed practice.

References
----------
Benjamini, Y. & Hochberg, Y. (1995). Controlling the false discovery rate. JRSS-B 57, 289-300.
Fisher, R. A. (1935). The logic of inductive inference. JRSS 98, 39-82.
Newcombe, R. G. (1998). Interval estimation for the difference between independent proportions.
Statistics in Medicine 17, 873-890.
Efron, B. & Tibshirani, R. (1993). An Introduction to the Bootstrap, ch. 14 (BCa).
"""

from .api import find_slices, search_slices
from .findings import Slice, SliceFindings

__all__ = ["Slice", "SliceFindings", "find_slices", "search_slices"]
