"""Multi-rater kappas built from rater pairs: pairwise Cohen, Light's kappa, Conger's kappa.

Input: ``codes`` of shape (n_items, n_raters), integer category indices 0..k-1, ``-1`` missing;
``k`` is the number of DECLARED categories.

- :func:`pairwise_cohen` — Cohen's kappa for every pair of raters, each over the items both
  rated (Cohen 1960; FCE 1969 intervals, see :mod:`reportgen.stats.cohen`).
- :func:`light_kappa` — Light (1971): the mean of the pairwise Cohen kappas, each pair over the
  items both rated.  Undefined when any pair's kappa is undefined (the mean is then not the
  published statistic).
- :func:`conger_kappa` — Conger (1980): the multi-rater generalisation of Cohen's kappa, with
  chance agreement from each rater's own category shares.  Missing ratings follow Gwet's
  generalisation (Gwet 2014, *Handbook of Inter-Rater Reliability*, 4th ed.; chapter from memory,
  formula confirmed numerically against irrCAC):
  observed agreement averages over the items with at least two ratings,
  p_a = mean_i (Σ_kl w_kl r_ik r_il − r_i) / (r_i(r_i − 1)); rater g's share of category k is
  p_gk = (items g put in k) / (items g rated), over every item g rated; chance agreement is
  p_e = Σ_kl w_kl Σ_{g≠h} p_gk p_hl / (r(r − 1)), the mean over ordered rater pairs.

No analytic standard error is attached to Light's or Conger's kappa: the interval comes from
the item bootstrap (``*_features`` / ``*_from_sums``), which resamples items with all their
ratings.

Validated against: Fleiss (1971) diagnoses data as rater-coded columns (Light 0.459 in R irr's
documentation; Conger 0.4418085 from irrCAC); irrCAC ``conger()`` and the mean of scikit-learn
pair-by-pair kappas on random data (test-only cross-checks).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Sequence

import numpy as np

from .cohen import (
    _categories_iv,
    _cohen_estimates,
    _identity,
    _kappa_from_tables,
    weights_iv,
)
from .proportion import _confidence_level_iv
from .results import Estimate
from .tables import _ones

# --------------------------------------------------------------------------- helpers


def _matrix_iv(codes: np.ndarray | list[list[int]], k: int) -> np.ndarray:
    arr = np.asarray(codes)
    if arr.ndim != 2:
        raise ValueError(f"codes must be a 2-D array items × raters, got {arr.ndim} dimension(s)")
    if arr.size == 0:
        return arr.astype(np.int64)
    if arr.dtype.kind not in "iu":
        raise TypeError(f"codes must hold integer category codes (-1 = missing), got {arr.dtype}")
    if arr.dtype.kind == "i" and arr.dtype.itemsize < 8:
        # viewed as unsigned and shifted by one, -1 becomes 0, valid codes 1 .. k and any other
        # negative code wraps round above k: one reduction checks the range
        unsigned = np.dtype(f"u{arr.dtype.itemsize}")
        if int(np.add(arr.view(unsigned), unsigned.type(1)).max()) > k:
            raise ValueError(f"codes hold values outside -1 .. {k - 1}")
        return arr
    if arr.min() < -1 or arr.max() >= k:
        raise ValueError(f"codes hold values outside -1 .. {k - 1}")
    return arr


def _rater_name(labels: Sequence[str] | None, g: int) -> str:
    return str(labels[g]) if labels is not None else f"rater {g + 1}"


@functools.lru_cache(maxsize=64)
def _pair_index(n_raters: int) -> tuple[np.ndarray, np.ndarray]:
    """Read-only (g, h) of every rater pair g < h, in ``np.triu_indices`` order (built once)."""
    g, h = np.triu_indices(n_raters, 1)
    g, h = g.astype(np.int64), h.astype(np.int64)
    g.flags.writeable = False
    h.flags.writeable = False
    return g, h


def _extended(codes: np.ndarray, k: int) -> np.ndarray:
    """Codes as intp with missing (-1) moved to an extra category k (dropped after counting)."""
    return np.where(codes < 0, k, codes).astype(np.intp, copy=False)


_SMALL = 1 << 14  # ratings up to which one bincount beats the column-wise counting


@functools.lru_cache(maxsize=64)
def _bin_offsets(n: int, r: int, k1: int) -> tuple[np.ndarray, np.ndarray]:
    """Read-only first-bin offsets of each item (column) and each rater (row), k1 bins each."""
    item_off = (np.arange(n, dtype=np.intp) * k1)[:, None]
    rater_off = (np.arange(r, dtype=np.intp) * k1)[None, :]
    item_off.flags.writeable = False
    rater_off.flags.writeable = False
    return item_off, rater_off


def _counts(codes: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    """((k, n_items) ratings per category per item, (n_raters, k) per rater), int64 counts.

    Item counts are category-major so that per-item sums run over k contiguous rows.

    Small studies: one bincount each.  Large ones: a loop over raters × categories (never over
    items) adding boolean columns into small-integer accumulators, which avoids building
    index arrays of the size of the ratings.
    """
    n, r = codes.shape
    if n * r <= _SMALL:
        # codes + 1 puts a missing rating in bin 0 of each item's / rater's k + 1 bins
        k1 = k + 1
        shifted = codes.astype(np.intp) + 1
        item_off, rater_off = _bin_offsets(n, r, k1)
        items = np.bincount((shifted + item_off).ravel(), minlength=n * k1)
        raters = np.bincount((shifted + rater_off).ravel(), minlength=r * k1)
        return items.reshape(n, k1)[:, 1:].T, raters.reshape(r, k1)[:, 1:]
    by_rater = np.ascontiguousarray(codes.T)
    acc = np.zeros((k, n), dtype=np.uint8 if r < 256 else np.int32)
    raters = np.empty((r, k), dtype=np.int64)
    for g in range(r):
        column = by_rater[g]
        for cat in range(k):
            hit = column == cat
            acc[cat] += hit
            raters[g, cat] = np.count_nonzero(hit)
    return acc.astype(np.int64), raters


@functools.lru_cache(maxsize=64)
def _pair_cell_map(r: int, k1: int) -> tuple[np.ndarray, np.ndarray]:
    """Read-only (r, n_pairs) integer map and (1, n_pairs) block offsets: for codes ``ext``
    (missing = k), ``ext @ map + offsets`` is each rater pair's cell of its k1 × k1 block."""
    g, h = _pair_index(r)
    to_cells = np.zeros((r, g.size), dtype=np.intp)
    pair = np.arange(g.size)
    to_cells[g, pair] = k1
    to_cells[h, pair] = 1
    block = (pair.astype(np.intp) * (k1 * k1))[None, :]
    to_cells.flags.writeable = False
    block.flags.writeable = False
    return to_cells, block


def _pair_tables_ext(ext: np.ndarray, k: int) -> np.ndarray:
    """(n_pairs, k, k) float64 tables of rater pairs over the items both rated.

    One bincount per rater pair (a loop over pairs, never over items).
    """
    n, r = ext.shape
    g_idx, h_idx = _pair_index(r)
    k1 = k + 1
    if n * g_idx.size <= _SMALL:  # small study: every pair's cells in one bincount
        to_cells, block = _pair_cell_map(r, k1)
        cell = ext @ to_cells + block  # pair p's cell: ext[g] * (k + 1) + ext[h], in block p
        flat = np.bincount(cell.ravel(), minlength=g_idx.size * k1 * k1)
        return flat.reshape(g_idx.size, k1, k1)[:, :k, :k].astype(np.float64)
    cols = np.ascontiguousarray(ext.T)
    tables = np.empty((g_idx.size, k, k))
    for p, (g, h) in enumerate(zip(g_idx.tolist(), h_idx.tolist(), strict=True)):
        cell = cols[g] * k1 + cols[h]
        tables[p] = np.bincount(cell, minlength=k1 * k1).reshape(k1, k1)[:k, :k]
    return tables


def pair_tables(codes: np.ndarray | list[list[int]], k: int) -> np.ndarray:
    """(n_pairs, k, k) int64 tables of rater pairs (g < h, in ``np.triu_indices`` order).

    Each table counts the items both raters rated.
    """
    k = _categories_iv(k)
    c = _matrix_iv(codes, k)
    return _pair_tables_ext(_extended(c, k), k).astype(np.int64)


def _given_tables(tables: np.ndarray | None, r: int, k: int) -> np.ndarray | None:
    """Validated float64 pair tables passed in by the caller, or None."""
    if tables is None:
        return None
    t = np.asarray(tables, dtype=np.float64)
    if t.shape != (r * (r - 1) // 2, k, k):
        raise ValueError(
            f"pair_tables must have shape ({r * (r - 1) // 2}, {k}, {k}) for {r} raters, "
            f"got {t.shape}"
        )
    return t


def _agreement_counts(by_category: np.ndarray) -> tuple[int, int]:
    """(items with ≥ 2 ratings, those on which every rating is the same) from (k, n) counts."""
    m = by_category.sum(axis=0)
    multi = m >= 2
    return int(multi.sum()), int((multi & (by_category.max(axis=0) == m)).sum())


# --------------------------------------------------------------------------- pairwise Cohen


def pairwise_cohen(
    codes: np.ndarray | list[list[int]],
    k: int,
    *,
    weights: np.ndarray | str | None = None,
    confidence_level: float = 0.95,
    pair_tables: np.ndarray | None = None,
) -> list[list[Estimate | None]]:
    """r×r matrix of Cohen's kappa between raters (rows/columns in ``codes`` column order).

    Entry [g][h] is the kappa of raters g and h over the items both rated (the table has rater g
    in rows); the diagonal is ``None``.  The matrix is symmetric: kappa and its FCE standard
    errors do not change when the table is transposed (weights are symmetric).  ``pair_tables``
    may pass the tables of :func:`pair_tables` for these ``codes`` when they are already built
    (Light's kappa needs the same ones).

    Validated against: scikit-learn ``cohen_kappa_score`` per pair (test-only cross-check).
    """
    k = _categories_iv(k)
    level = _confidence_level_iv(confidence_level)
    c = _matrix_iv(codes, k)
    w = weights_iv(weights, k)
    r = c.shape[1]
    tables = _given_tables(pair_tables, r, k)
    if tables is None:
        tables = _pair_tables_ext(_extended(c, k), k)
    g_idx, h_idx = _pair_index(r)
    out: list[list[Estimate | None]] = [[None] * r for _ in range(r)]
    estimates = _cohen_estimates(tables, w, level)
    for est, g, h in zip(estimates, g_idx.tolist(), h_idx.tolist(), strict=True):
        out[g][h] = est
        out[h][g] = est
    return out


# --------------------------------------------------------------------------- Light's kappa


def light_kappa_features(codes: np.ndarray | list[list[int]], k: int) -> np.ndarray:
    """(n_items, n_pairs·k²) float64: per rater pair, the one-hot of the item's cell.

    A pair's block is zero when either rating is missing.  Memory is n_items × r(r−1)/2 × k²
    doubles.
    """
    k = _categories_iv(k)
    c = _matrix_iv(codes, k)
    n, r = c.shape
    n_pairs = r * (r - 1) // 2
    g, h = _pair_index(r)
    a = c[:, g].astype(np.int64)
    b = c[:, h].astype(np.int64)
    valid = (a >= 0) & (b >= 0)
    cell = np.arange(n_pairs, dtype=np.int64) * (k * k) + a * k + b
    feats = np.zeros((n, n_pairs * k * k), dtype=np.float64)
    rows = np.broadcast_to(np.arange(n)[:, None], cell.shape)
    feats[rows[valid], cell[valid]] = 1.0
    return feats


def _pairs_from_width(width: int, k: int) -> int:
    kk = k * k
    if width % kk:
        raise ValueError(f"sums must have a multiple of k² = {kk} columns, got {width}")
    return width // kk


def light_kappa_from_sums(
    sums: np.ndarray, k: int, weights: np.ndarray | str | None = None
) -> np.ndarray:
    """Light's kappa from column sums of :func:`light_kappa_features`, shape (..., n_pairs·k²).

    Mean over rater pairs of Cohen's kappa; NaN when any pair's kappa is undefined.

    Validated against: :func:`light_kappa` on resampled items (test-only comparison).
    """
    k = _categories_iv(k)
    s = np.asarray(sums, dtype=np.float64)
    n_pairs = _pairs_from_width(s.shape[-1], k)
    if n_pairs < 1:
        raise ValueError("Light's kappa needs at least two raters (one pair)")
    return _light_parts(s, k, n_pairs, weights_iv(weights, k))[1]


def _light_parts(
    sums: np.ndarray, k: int, n_pairs: int, w: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """(pair kappas (..., n_pairs), their mean (...)); NaN propagates from undefined pairs."""
    kappas = _kappa_from_tables(sums.reshape(sums.shape[:-1] + (n_pairs, k, k)), w)
    return kappas, kappas.mean(axis=-1)


def light_kappa(
    codes: np.ndarray | list[list[int]],
    k: int,
    *,
    weights: np.ndarray | str | None = None,
    confidence_level: float = 0.95,
    rater_labels: Sequence[str] | None = None,
    pair_tables: np.ndarray | None = None,
) -> Estimate:
    """Light's (1971) kappa: the mean of Cohen's kappa over all pairs of raters.

    Each pair uses the items both raters rated.  No analytic standard error: ``se`` and the
    interval are ``None`` (use the item bootstrap with the features below).  ``extra`` holds
    ``pair_kappas`` (list in ``np.triu_indices`` order, ``None`` where undefined) and ``pairs``.
    ``items`` counts items with at least two ratings, ``agreeing`` those on which all agree.
    ``pair_tables`` may pass the tables of :func:`pair_tables` for these ``codes`` when they are
    already built (the pairwise matrix needs the same ones).

    Validated against: R irr documentation value 0.459 on the Fleiss (1971) diagnoses data;
    mean of scikit-learn pair-by-pair kappas on random data (test-only).
    """
    k = _categories_iv(k)
    level = _confidence_level_iv(confidence_level)
    c = _matrix_iv(codes, k)
    r = c.shape[1]
    items, agreeing = _agreement_counts(_counts(c, k)[0])
    if r < 2:
        return Estimate(
            estimate=None,
            confidence_level=level,
            items=items,
            agreeing=agreeing,
            warnings=("Light's kappa is undefined: it needs at least two raters.",),
        )
    w = weights_iv(weights, k)
    n_pairs = r * (r - 1) // 2
    # The point estimate goes through the bootstrap's formula (_light_parts); its sums are the
    # column sums of light_kappa_features (the pair tables), one bincount per pair.
    tables = _given_tables(pair_tables, r, k)
    if tables is None:
        tables = _pair_tables_ext(_extended(c, k), k)
    sums = tables.reshape(-1)
    pair_k, mean = _light_parts(sums, k, n_pairs, w)
    value = float(mean)
    g_idx, h_idx = _pair_index(r)
    pairs = list(zip(g_idx.tolist(), h_idx.tolist(), strict=True))
    extra: dict[str, object] = {
        "pair_kappas": [None if v != v else v for v in pair_k.tolist()],  # NaN -> None
        "pairs": pairs,
    }
    if not np.isfinite(value):
        bad = [
            f"{_rater_name(rater_labels, g)} and {_rater_name(rater_labels, h)}"
            for (g, h), v in zip(pairs, pair_k, strict=True)
            if not np.isfinite(v)
        ]
        return Estimate(
            estimate=None,
            confidence_level=level,
            items=items,
            agreeing=agreeing,
            extra=extra,
            warnings=(
                "Light's kappa is undefined: Cohen's kappa is undefined for "
                f"{len(bad)} of {len(pairs)} rater pairs ({'; '.join(bad)}) because the pair has "
                "no item in common or both put every shared item in the same category.",
            ),
        )
    return Estimate(
        estimate=value,
        confidence_level=level,
        items=items,
        agreeing=agreeing,
        extra=extra,
    )


# --------------------------------------------------------------------------- Conger's kappa


def conger_kappa_features(
    codes: np.ndarray | list[list[int]], k: int, weights: np.ndarray | str | None = None
) -> np.ndarray:
    """(n_items, 2 + r·k) float64 item-additive sums for Conger's kappa.

    Columns: [0] 1 if the item has at least two ratings; [1] the item's weighted disagreement
    Σ_kl (1 − w_kl) r_ik r_il / (r_i(r_i − 1)) (0 below two ratings); [2:] one-hot of each
    rater's category (rater-major, r·k columns; zero where the rating is missing).
    """
    k = _categories_iv(k)
    return _conger_features(_matrix_iv(codes, k), k, weights_iv(weights, k))


def _item_disagreement(by_category: np.ndarray, w: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per item from (k, n) counts: (≥ 2 ratings mask, Σ_kl (1 − w_kl) r_ik r_il / (r_i(r_i − 1)),
    0 below two ratings)."""
    counts = np.ascontiguousarray(by_category, dtype=np.float64)
    ones = _ones(counts.shape[0])
    m = ones @ counts
    multi = m >= 2
    dis = ones @ (((1.0 - w) @ counts) * counts)
    out = np.zeros_like(dis)
    np.divide(dis, m * (m - 1.0), out=out, where=multi)
    return multi, out


def _conger_features(c: np.ndarray, k: int, w: np.ndarray) -> np.ndarray:
    n, r = c.shape
    onehot = (c[:, :, None] == np.arange(k)).reshape(n, r * k)
    multi, dis = _item_disagreement(onehot.reshape(n, r, k).sum(axis=1).T, w)
    feats = np.empty((n, 2 + r * k), dtype=np.float64)
    feats[:, 0] = multi
    feats[:, 1] = dis
    feats[:, 2:] = onehot
    return feats


def _conger_sums(c: np.ndarray, k: int, w: np.ndarray) -> tuple[np.ndarray, int, int]:
    """Column sums of the Conger features without building them (same numbers), the number
    of items with two or more ratings and of those on which every rating is alike."""
    counts, rater_counts = _counts(c, k)
    counts = counts.astype(np.float64)
    ones = _ones(k)
    m = ones @ counts
    multi = m >= 2
    dis = ones @ (((1.0 - w) @ counts) * counts)
    np.divide(dis, m * (m - 1.0), out=dis, where=multi)
    items = int(np.count_nonzero(multi))
    if items < multi.shape[0]:
        dis[~multi] = 0.0
    if not items:
        agreeing = 0
    elif w is _identity(k):
        # unweighted: an item's disagreement sum_k r_k (r - r_k) is exactly 0 iff all alike
        agreeing = int(np.count_nonzero(multi & (dis == 0.0)))
    else:
        agreeing = int(np.count_nonzero(multi & (counts.max(axis=0) == m)))
    sums = np.empty(2 + rater_counts.size)
    sums[0] = items
    sums[1] = dis.sum()
    sums[2:] = rater_counts.ravel()
    return sums, items, agreeing


def conger_kappa_from_sums(
    sums: np.ndarray, k: int, weights: np.ndarray | str | None = None
) -> np.ndarray:
    """Conger's kappa from column sums of :func:`conger_kappa_features`, shape (..., 2 + r·k).

    Raters with no rating in the sums are left out (as the point estimate does), so a
    bootstrap replicate that happens to draw none of a rater's items stays defined.  NaN where
    undefined: no item with two ratings, fewer than two raters with ratings, or chance
    agreement 1.  The sums must come from features built with the same ``weights``.

    Validated against: :func:`conger_kappa` on resampled items, irrCAC via that function.
    """
    k = _categories_iv(k)
    s = np.asarray(sums, dtype=np.float64)
    width = s.shape[-1]
    if width < 2 or (width - 2) % k:
        raise ValueError(f"sums must have 2 + r·k columns for k = {k}, got {width}")
    if (width - 2) // k < 2:
        raise ValueError("Conger's kappa needs at least two raters")
    return _conger_parts(s, k, weights_iv(weights, k))[0]


def _conger_parts(
    s: np.ndarray, k: int, w: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(kappa, 1 − p_a, 1 − p_e) from sums (..., 2 + r·k); kappa NaN where undefined."""
    r = (s.shape[-1] - 2) // k
    d = 1.0 - w
    if s.ndim == 1:  # one study: the same sums in Python floats (r·k numbers)
        return _conger_parts_one(s.tolist(), k, r, d.tolist())
    n2 = s[..., 0]
    # Conger (1980) / Gwet (2014): p_e = Σ_kl w_kl Σ_{g≠h} p_gk p_hl / (r(r − 1)).
    classif = s[..., 2:].reshape(s.shape[:-1] + (r, k))
    if s.ndim > 1 and s.shape[0] >= 64:
        # a batch (bootstrap replicates): the same sums as below, written as 2-D matrix products
        # (numpy reduces over short trailing axes and multiplies stacks of small matrices slowly)
        lead = s.shape[:-1]
        flat = classif.reshape(-1, k)  # (batch·r, k)
        n_g = (flat @ _ones(k)).reshape(lead + (r,))
        r_eff = (n_g > 0) @ _ones(r)
        share = classif / np.where(n_g > 0, n_g, 1.0)[..., None]
        total = share.sum(axis=-2)
        flat_share = share.reshape(-1, k)
        own = (((flat_share @ d) * flat_share) @ _ones(k)).reshape(lead + (r,)) @ _ones(r)
        cross = ((total @ d) * total) @ _ones(k) - own
    else:
        n_g = classif.sum(axis=-1)
        r_eff = (n_g > 0).sum(axis=-1).astype(np.float64)  # raters with at least one rating
        share = classif / np.where(n_g > 0, n_g, 1.0)[..., None]  # p_gk (0 for idle raters)
        total = share.sum(axis=-2)  # Σ_g p_gk
        # Σ_kl d_kl Σ_{g≠h} p_gk p_hl = Σ_kl d_kl [(Σ_g p_gk)(Σ_h p_hl) − Σ_g p_gk p_gl]
        cross = ((total @ d) * total).sum(axis=-1) - ((share @ d) * share).sum(axis=(-2, -1))
    pairs = r_eff * (r_eff - 1.0)
    dis_exp = np.divide(cross, pairs, out=np.zeros(np.shape(n2)), where=pairs > 0)  # 1 − p_e
    dis_obs = np.divide(s[..., 1], n2, out=np.full(np.shape(n2), np.nan), where=n2 > 0)  # 1 − p_a
    ok = (n2 > 0) & (r_eff >= 2) & (dis_exp > 0.0)
    ratio = np.divide(dis_obs, dis_exp, out=np.full(np.shape(n2), np.nan), where=ok)
    return 1.0 - ratio, dis_obs, dis_exp


def _conger_parts_one(
    s: list[float], k: int, r: int, d: list[list[float]]
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """:func:`_conger_parts` for one vector of sums."""
    n2, dis_sum = s[0], s[1]
    total = [0.0] * k
    own = 0.0
    r_eff = 0
    cats = range(k)
    for g in range(r):
        row = s[2 + g * k : 2 + (g + 1) * k]
        n_g = sum(row)
        if not n_g > 0:
            continue  # an idle rater's shares are all zero
        r_eff += 1
        share = [x / n_g for x in row]
        for c in cats:
            total[c] += share[c]
        for b in cats:
            acc = 0.0
            for a in cats:
                acc += share[a] * d[a][b]
            own += acc * share[b]
    cross = 0.0
    for b in cats:
        acc = 0.0
        for a in cats:
            acc += total[a] * d[a][b]
        cross += acc * total[b]
    cross -= own
    pairs = r_eff * (r_eff - 1.0)
    dis_exp = cross / pairs if pairs > 0 else 0.0  # 1 − p_e
    dis_obs = dis_sum / n2 if n2 > 0 else math.nan  # 1 − p_a
    ok = n2 > 0 and r_eff >= 2 and dis_exp > 0.0
    kappa = 1.0 - dis_obs / dis_exp if ok else math.nan
    return np.float64(kappa), np.float64(dis_obs), np.float64(dis_exp)


def conger_kappa(
    codes: np.ndarray | list[list[int]],
    k: int,
    *,
    weights: np.ndarray | str | None = None,
    confidence_level: float = 0.95,
    rater_labels: Sequence[str] | None = None,
) -> Estimate:
    """Conger's (1980) kappa for several raters, missing ratings per Gwet (2014).

    Raters who rated nothing are left out with a warning.  No analytic standard error here:
    ``se`` and the interval are ``None`` (use the item bootstrap with the features).  ``extra``
    holds ``p_a`` and ``p_e``.  ``items`` counts items with at least two ratings (the ones that
    enter observed agreement), ``agreeing`` those on which all ratings agree.

    Validated against: Fleiss (1971) diagnoses data as rater-coded columns (0.4418085, irrCAC);
    irrCAC ``conger()`` on random data with missing ratings (test-only cross-check).
    """
    k = _categories_iv(k)
    level = _confidence_level_iv(confidence_level)
    c = _matrix_iv(codes, k)
    w = weights_iv(weights, k)
    warnings: list[str] = []
    # The point estimate goes through the bootstrap's formula (_conger_parts); its sums are the
    # column sums of conger_kappa_features, counted directly without building them.
    sums, items, agreeing = _conger_sums(c, k, w)
    rated = sums[2:].reshape(-1, k) @ _ones(k) > 0 if c.size else (c >= 0).any(axis=0)
    if not rated.all():
        idle = [_rater_name(rater_labels, g) for g in np.flatnonzero(~rated)]
        warnings.append(f"Conger's kappa leaves out raters with no rating: {', '.join(idle)}.")
        c = c[:, rated]
        sums, items, agreeing = _conger_sums(c, k, w)

    def undefined(reason: str) -> Estimate:
        return Estimate(
            estimate=None,
            confidence_level=level,
            items=items,
            agreeing=agreeing,
            warnings=(*warnings, reason),
        )

    if c.shape[1] < 2:
        return undefined("Conger's kappa is undefined: it needs at least two raters with ratings.")
    if items == 0:
        return undefined("Conger's kappa is undefined: no item has two or more ratings.")
    kappa_arr, dis_obs, dis_exp = _conger_parts(sums, k, w)
    value = float(kappa_arr)
    extra: dict[str, object] = {"p_a": 1.0 - float(dis_obs), "p_e": 1.0 - float(dis_exp)}
    if not np.isfinite(value):
        return Estimate(
            estimate=None,
            confidence_level=level,
            items=items,
            agreeing=agreeing,
            extra=extra,
            warnings=(
                *warnings,
                "Conger's kappa is undefined: every rater put every item in the same category, "
                "so chance agreement is 1.",
            ),
        )
    if items < c.shape[0]:
        warnings.append(
            f"{c.shape[0] - items} item(s) with fewer than two ratings do not enter the observed "
            "agreement of Conger's kappa (their single ratings still count in the raters' shares)."
        )
    return Estimate(
        estimate=value,
        confidence_level=level,
        items=items,
        agreeing=agreeing,
        warnings=tuple(warnings),
        extra=extra,
    )
