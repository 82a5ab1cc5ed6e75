"""Counterfactual flip tests: does the decision change when a protected attribute (or what stands in
for it) changes?

:func:`flip_test` runs one mode for one attribute: ``direct`` (:mod:`.direct`), ``transport``
(:mod:`.transport`) or ``twins`` (:mod:`.twins`); :mod:`.context` validates once and assembles rows,
:mod:`.transport_maps` moves proxies, :mod:`.transport_boot` gives transport its intervals,
:mod:`.breakdown` shows where flips concentrate, :mod:`.findings` holds the results and sentences.

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
