"""Small statistical helpers shared by the scorecard and the pair-class tests.

* :func:`holm` — Holm step-down adjusted p-values, controlling the family-wise
  error rate (Scand. J. Stat. 6, 65 (1979));
* :func:`benjamini_hochberg` — step-up adjusted p-values (q-values) controlling
  the false discovery rate (J. R. Stat. Soc. B 57, 289 (1995));
* :func:`partial_correlation` — Pearson correlation of x and y after removing a
  linear fit on one or more controls (applied to ranks it is the Spearman partial
  correlation);
* :func:`chance_precision` — expected precision at k under random neighbors.
"""

from __future__ import annotations

import numpy as np


def _p_values(p_values) -> np.ndarray:
    p = np.asarray(p_values, dtype=np.float64).ravel()
    if p.size and (np.isnan(p).any() or (p < 0).any() or (p > 1).any()):
        raise ValueError(f"p-values must lie between 0 and 1, got {p_values!r}")
    return p


def _step(p_values, adjust) -> np.ndarray:
    """Apply ``adjust`` to the sorted p-values and return the result in the order given."""
    p = _p_values(p_values)
    if p.size == 0:
        return p
    order = np.argsort(p, kind="stable")
    out = np.empty(p.size)
    out[order] = adjust(p[order], p.size)
    return out


def holm(p_values) -> np.ndarray:
    """Holm-adjusted p-values, in the order given: p_(i) * (m - i + 1), made monotone and capped at 1."""
    return _step(p_values, lambda p, m: np.maximum.accumulate(np.minimum(1.0, (m - np.arange(m)) * p)))


def benjamini_hochberg(p_values) -> np.ndarray:
    """Benjamini-Hochberg adjusted p-values, in the order given: min over j >= i of p_(j) * m / j, capped at 1."""
    return _step(p_values, lambda p, m: np.minimum(
        1.0, np.minimum.accumulate((p * m / np.arange(1, m + 1))[::-1])[::-1]))


def partial_correlation(x, y, controls) -> float:
    """Correlation of x and y with a least-squares fit on ``controls`` (one column each, plus an intercept) removed.

    With one control this is the textbook r_xy.z = (r_xy - r_xz r_yz) / sqrt((1 - r_xz^2)(1 - r_yz^2)).
    Pass ranks to get the Spearman partial correlation.
    """
    x = np.asarray(x, dtype=np.float64).ravel()
    y = np.asarray(y, dtype=np.float64).ravel()
    z = np.asarray(controls, dtype=np.float64)
    z = z.reshape(-1, 1) if z.ndim == 1 else z.T if z.shape[0] != x.size else z
    if x.size != y.size or z.shape[0] != x.size:
        raise ValueError(f"x, y and the controls must have the same length, got {x.size}, {y.size}, {z.shape[0]}")
    design = np.column_stack([np.ones(x.size), z])
    fit = np.linalg.lstsq(design, np.column_stack([x, y]), rcond=None)[0]
    residual = np.column_stack([x, y]) - design @ fit
    norm = np.sqrt((residual[:, 0] @ residual[:, 0]) * (residual[:, 1] @ residual[:, 1]))
    return float(residual[:, 0] @ residual[:, 1] / norm) if norm > 0 else float("nan")


def chance_precision(relevant) -> float:
    """Expected precision at k when each material's k neighbors are drawn at random from the other n - 1.

    For every material with at least one relevant partner the expectation is (relevant partners) / (n - 1),
    whatever k is; the result is their mean, the same materials precision at k averages over.
    """
    relevant = np.asarray(relevant, dtype=bool).copy()
    n = relevant.shape[0]
    if relevant.ndim != 2 or relevant.shape[1] != n or n < 2:
        raise ValueError(f"relevant must be a square boolean matrix over at least 2 materials, got {relevant.shape}")
    np.fill_diagonal(relevant, False)
    counts = relevant.sum(axis=1)
    counts = counts[counts > 0]
    return float(np.mean(counts / (n - 1))) if counts.size else float("nan")
