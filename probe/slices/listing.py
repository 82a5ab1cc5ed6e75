"""Which carried slices are listed, and in which order.

A carried slice is listed when, on the estimate part,

1. it is worse than the rest (a positive gap in the bad direction), and
2. it adds something to the slices listed above it: when it shares rows with them, either its own
   other rows are still worse than the rows in none of them, or the slice is worse than the listed
   rows it does not hold (one-sided p-values, exact for 0/1 and {-1, 0, 1} outcomes, Welch
   otherwise, at most ``(1 - confidence_level) / carried``: Bonferroni over the carried slices, any
   of which may be checked). A broad slice that is bad only because it holds a listed slice's rows
   is not listed again; a sharper slice inside a broad listed one is. Under a design that is not
   plain the p-values are those of :mod:`.estimate_design` (score test on effective counts).

The order is the estimate part's evidence: the gap's lower limit at the report's level, on rows the
search did not see, then the p-value; at most ``top`` are listed. The q-values are not touched: they are taken over the whole carried family, fixed before the estimate
part is looked at, and listing fewer slices only drops discoveries.
"""

from __future__ import annotations

import numpy as np

from .estimate_design import design_pvalue
from .pvalues import exact_pvalue, is_ternary, real_pvalue

__all__ = ["listed"]


def listed(rows, masks, y, *, binary, direction, confidence_level, top, design=None, sums=None):
    """Indices into ``rows`` (the dicts of :func:`~probe.slices.estimate.estimate`) of the slices
    listed, in order; ``masks`` their rows of the estimate part's outcome ``y``; ``design`` the
    estimate part's :class:`~probe.slices.estimate_design.Basis` (None when plain) and ``sums``
    the slices' term sums when counted already."""
    sign = 1.0 if direction == "higher" else -1.0
    order = sorted((k for k in range(len(rows)) if sign * rows[k]["gap"].value > 0),
                   key=lambda k: (-rows[k]["evidence"], rows[k]["p"]))
    cut = (1.0 - confidence_level) / max(len(rows), 1)
    worse = _Worse(y, binary, "greater" if sign > 0 else "less", design)
    if design is not None and design.additive:
        return _listed_by_sums(order, masks, design, worse, cut, top, sums)
    out, covered = [], np.zeros(len(y), dtype=bool)
    for k in order:
        if len(out) >= top:
            break
        mask = masks[k]
        if out and np.any(mask & covered):
            # it adds worse rows of its own, or it is worse than the listed rows it does not hold
            # (a sharper place inside a broad listed slice)
            if (worse.pvalue(mask & ~covered, ~(mask | covered)) > cut
                    and worse.pvalue(mask, covered & ~mask) > cut):
                continue
        out.append(k)
        covered |= mask
    return out


def _listed_by_sums(order, masks, basis, worse, cut, top, sums=None):
    """:func:`listed` from sums of per-row terms (weights with the rows as units): the rows in no
    listed slice and those of the listed ones are sums by inclusion and exclusion, so only a
    slice's overlap with the listed rows is summed anew."""
    out, covered = [], np.zeros(len(masks[0]) if masks else 0, dtype=bool)
    s_cov = np.zeros_like(basis.total)
    for k in order:
        if len(out) >= top:
            break
        mask = masks[k]
        s_mask = basis.sums(mask) if sums is None else sums[k]
        inter = mask & covered
        s_inter = basis.sums(inter) if out else np.zeros_like(s_cov)
        if out and s_inter[0] > 0:
            alone = (s_mask - s_inter, basis.total - s_mask - s_cov + s_inter)
            if (worse.pvalue_sums(*alone) > cut
                    and worse.pvalue_sums(s_mask, s_cov - s_inter) > cut):
                continue
        out.append(k)
        covered |= mask
        s_cov = s_cov + s_mask - s_inter
    return out


class _Worse:
    """One-sided p-values of some rows against others on one outcome (its per-row terms and its
    kind worked out once)."""

    def __init__(self, y, binary, alternative, design=None):
        self.alt, self.binary, self.design, self.y = alternative, binary, design, y
        if design is not None:
            self.basis = design
        elif binary:
            self.events = y == 1
        else:
            self.y, self.y_sq, self.ternary = y, y * y, is_ternary(y)

    def pvalue(self, a, b) -> float:
        """The rows ``a`` against the rows ``b`` (1 when either is empty)."""
        na, nb = float(np.count_nonzero(a)), float(np.count_nonzero(b))
        if na < 1 or nb < 1:
            return 1.0
        if self.design is not None:
            return self._design_p(self.basis.pair(a, b)[0])
        if self.binary:
            p = exact_pvalue(np.count_nonzero(a & self.events), na,
                             np.count_nonzero(b & self.events), nb, alternative=self.alt)
        else:
            sa, sb = ((self.y @ m, self.y_sq @ m) for m in (a, b))
            p = real_pvalue(*sa, na, *sb, nb, ternary=self.ternary, alternative=self.alt)
        p = float(np.asarray(p).ravel()[0])
        return 1.0 if np.isnan(p) else p

    def _design_p(self, c) -> float:
        """The score test (0/1) or Welch's (real) on pseudo-sums of effective counts."""
        p = float(np.asarray(design_pvalue(c, self.binary, self.alt)).ravel()[0])
        return 1.0 if np.isnan(p) else p

    def pvalue_sums(self, t1, t2) -> float:
        """As :meth:`pvalue`, from the term sums of the two sets of rows (additive bases)."""
        if t1[0] < 0.5 or t2[0] < 0.5:
            return 1.0
        c, _ = self.basis.pair(None, sums=(t1, t2))
        return self._design_p(c)
