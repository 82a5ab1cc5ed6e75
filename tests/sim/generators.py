"""Seeded data generators of our own for the simulations: mixed column types, uneven level
frequencies, correlated columns, missing values and small groups.

Nothing here knows about probe; a simulation builds its truth (a null outcome, a planted slice, a
known flip rate) on top of :func:`mixed_frame` and checks probe against it.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["mixed_frame", "uneven_levels", "null_outcome", "planted_outcome", "group_column",
           "shifted_proxy_frame"]


def uneven_levels(rng, n, k, *, skew=1.2, prefix="L"):
    """``n`` draws of ``k`` levels with Zipf-like frequencies (level 0 most common)."""
    w = 1.0 / np.arange(1, k + 1) ** skew
    return np.array([f"{prefix}{i}" for i in range(k)], dtype=object)[
        rng.choice(k, size=n, p=w / w.sum())]


def group_column(rng, n, shares, *, prefix="g"):
    """A protected-attribute-like column with the given group shares (small groups allowed)."""
    shares = np.asarray(shares, dtype=float)
    return np.array([f"{prefix}{i}" for i in range(len(shares))], dtype=object)[
        rng.choice(len(shares), size=n, p=shares / shares.sum())]


def mixed_frame(rng, n, n_cols=12):
    """A frame of ``n_cols`` (8 to 16) mixed columns over ``n`` rows.

    Columns, in order (the first ``n_cols`` are kept):
    ``region`` (6 uneven levels), ``channel`` (3), ``age`` (normal, rounded), ``income`` (lognormal,
    correlated with ``age``), ``tenure`` (integer counts, correlated with ``age``), ``band`` (5
    levels cut from ``income``: correlated), ``flag`` (bool, 15 %), ``score`` (uniform, 3 % missing),
    ``segment`` (9 very uneven levels), ``rate`` (beta), ``kind`` (4 levels, 5 % missing),
    ``visits`` (Poisson), then extra noise columns ``x12`` ... .
    """
    if not 8 <= n_cols <= 16:
        raise ValueError("n_cols must be between 8 and 16")
    age = np.round(rng.normal(42, 12, n).clip(18, 90))
    income = np.exp(10 + 0.015 * (age - 42) + rng.normal(0, 0.5, n))
    cols = {
        "region": uneven_levels(rng, n, 6, prefix="r"),
        "channel": uneven_levels(rng, n, 3, skew=0.6, prefix="c"),
        "age": age,
        "income": np.round(income, 2),
        "tenure": rng.poisson(np.clip((age - 18) / 6, 0.2, None)),
        "band": pd.cut(income, [0, 15000, 22000, 30000, 45000, np.inf],
                       labels=["b1", "b2", "b3", "b4", "b5"]).astype(str),
        "flag": rng.random(n) < 0.15,
        "score": np.where(rng.random(n) < 0.03, np.nan, rng.random(n)),
        "segment": uneven_levels(rng, n, 9, skew=1.8, prefix="s"),
        "rate": rng.beta(2, 5, n),
        "kind": np.where(rng.random(n) < 0.05, None, uneven_levels(rng, n, 4, prefix="k")),
        "visits": rng.poisson(3, n),
    }
    for j in range(12, n_cols):
        cols[f"x{j}"] = rng.normal(size=n)
    return pd.DataFrame(dict(list(cols.items())[:n_cols]))


def null_outcome(rng, n, rate):
    """0/1 outcome independent of every column: P(1) = ``rate`` for each row."""
    return (rng.random(n) < rate).astype(np.int8)


def planted_outcome(rng, mask, base, lift):
    """0/1 outcome with P(1) = ``base`` outside ``mask`` and ``base + lift`` inside."""
    p = np.where(mask, base + lift, base)
    return (rng.random(len(mask)) < p).astype(np.int8)


def shifted_proxy_frame(rng, n, source_share, shift, *, n_cols=8):
    """:func:`mixed_frame` plus ``group`` (``"src"`` with share ``source_share``, else ``"dst"``), a
    proxy ``p`` ~ N(0, 1) in ``src`` and N(``shift``, 1) in ``dst`` (so the true quantile map from
    ``src`` to ``dst`` is ``p + shift``; ``shift=0``: a chance proxy) and ``u`` ~ N(0, 1) in
    both."""
    frame = mixed_frame(rng, n, n_cols)
    src = rng.random(n) < source_share
    frame["group"] = np.where(src, "src", "dst")
    frame["p"] = rng.normal(size=n) + np.where(src, 0.0, shift)
    frame["u"] = rng.normal(size=n)
    return frame
