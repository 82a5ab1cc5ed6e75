"""Counterfactual flip tests: does the decision change when a protected attribute (or what stands in
for it) changes?

:func:`flip_test` runs one mode for one attribute: ``direct`` (:mod:`.direct`), ``transport``
(:mod:`.transport`) or ``twins`` (:mod:`.twins`); :mod:`.context` validates once and assembles rows,
:mod:`.transport_maps` moves proxies, :mod:`.transport_boot` gives transport its intervals,
:mod:`.breakdown` shows where flips concentrate, :mod:`.findings` holds the results and sentences,
:mod:`.weighting` reads the sampling design.

Sampling designs
----------------
``flip_test(..., sample_weight=)`` or ``design=`` (:mod:`probe.design`: row weights, clusters,
attributes known as membership probabilities). A plain design (weights 0 or 1, no clusters, 0/1
memberships) runs the unweighted code on the rows of weight 1, so its results are the unweighted
ones exactly. Otherwise:

- **Who is in a group.** Every row of positive weight, with weight ``w``. When the attribute is
  known only as membership probabilities (``design.membership[attribute]``, not a column), every
  row of positive probability is in each group with weight ``w * pi`` and its copies share its
  unit (:func:`probe.design.expand_rows`'s rule); ``rows`` is then the sum of the probabilities.
  A direct flip does not apply (the attribute is not a model input; the row says so as for any
  non-input); transport ranks proxies against each row's most probable group. A recorded
  column is flipped as before: membership probabilities of other attributes play no part.
- **Rates.** Flip rates (and their directions, the control's and the breakdown's) are the weighted
  shares of the source group, with Wilson intervals on the effective counts (linearisation
  variance, clusters or rows as units); the mean score change is a weighted mean with a t
  interval on its linearisation variance (``"t-design"``). Each estimate records ``n_effective``;
  each row its ``weight`` and, with clusters, ``clusters``.
- **Transport.** The maps are those of the weighted distributions of both groups (target shares
  weighted by membership too; :mod:`.transport_maps` says why integer weights are not exactly
  duplicated rows there). The placebo's part is made of whole units. The bootstrap draws the
  pair's units with replacement *once* for both groups (a cluster with rows in both, or a row of
  uncertain membership, moves both groups together) and weights each row by its unit's draws
  times its weight; its placebo map re-uses the resampled part rather than a fresh one. Rates
  keep ``"wilson-design-effect"``, now on the weighted rate, ``n_effective = n / deff``.
- **Twins.** Neighbours are found as before; each person's comparison is weighted by their weight.
  With uncertain membership a row is in both pools, so the cross-group search drops the person
  themself, and each twin's vote (and score) counts with its probability of belonging to the pool's
  group. The excess's half-sample interval draws half of the pair's *units* (clusters, or rows;
  a row in both groups is one unit) with all their rows, and its ``n_effective`` is
  ``s^2 / se^2``. Neither the neighbour search nor the control is weighted: a weight says how
  many people a row stands for, not how alike two people are.
- **What is not established.** The coverage of these intervals under a design has not been
  simulated (``tests/sim/sim_flips.py`` covers the unweighted ones). On one planted case with
  membership probabilities of 0.8 / 0.2 (6,000 rows, 12 seeds), transport's bootstrap variance of
  the flip rate averaged about 0.7 of the variance over 30 fresh samples, so its interval may be
  too narrow there. Rows of weight 0 are in no group but are still scored with the rest.

References
----------
Wilson, E. B. (1927). Probable inference, the law of succession, and statistical inference. JASA 22.
Bendick, M. (2007). Situation testing for employment discrimination in the United States. Horizons
stratégiques 5 (paired testing, the idea behind the twins mode).
Villani, C. (2009). Optimal Transport, Old and New, ch. 2 (monotone rearrangement on the line).
"""

from .api import flip_test
from .findings import DIRECT_FLIP_CAUTION, SCREEN_CAUTION, FlipFindings, FlipRow, FlipSlice
from .transport import MIN_PROXY_AUC
from .transport_maps import quantile_map, transport_categorical

__all__ = [
    "flip_test",
    "FlipFindings",
    "FlipRow",
    "FlipSlice",
    "DIRECT_FLIP_CAUTION",
    "SCREEN_CAUTION",
    "MIN_PROXY_AUC",
    "quantile_map",
    "transport_categorical",
]
