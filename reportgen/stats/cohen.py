"""Cohen's kappa for two ratings of the same items, unweighted and weighted.

Conventions (see ``/work/shared/REFERENCE-CHECKS.md``):

- The table has the first rating in rows and the second in columns, over the ``k`` DECLARED
  categories (unobserved categories stay as empty rows/columns, so weights always come from the
  full declared list).
- Kappa is written in its disagreement form, κ = 1 − n·Σ d_ij n_ij / Σ d_ij n_i. n_.j with
  d = 1 − w; this is algebraically (p_o − p_e)/(1 − p_e) and makes "chance agreement is 1"
  an exact zero test rather than a floating-point comparison.
- The interval uses the large-sample non-null standard error of Fleiss, Cohen & Everitt (1969);
  the test of κ = 0 (z, two-sided p) uses their null standard error.  Never an interval from the
  null SE.
- Weighted kappa follows Cohen (1968) with agreement weights (1 on the diagonal) and the FCE
  (1969) weighted variances.

Bootstrap interface: ``cohen_kappa_features(a, b, k)`` gives each item's one-hot cell of the
k×k table (k² columns; zero row when either rating is missing) and
``cohen_kappa_from_sums(sums, k, weights)`` turns column sums (any leading batch shape) into
kappa, NaN where undefined.  The point estimate goes through the same function.

Validated against: Cohen (1960) N = 200 table (κ = .492); Fleiss, Cohen & Everitt (1969)
variances via an independently printed example (κ 0.4842, ASE 0.1380, ASE₀ 0.1484; linear
κ_w 0.4701) quoted in statsmodels' test-suite; Feinstein & Cicchetti (1990) prevalence/bias
tables; Byrt, Bishop & Carlin (1993) PABAK identity; statsmodels and scikit-learn on random
tables (test-only cross-checks).
"""

from __future__ import annotations

import contextlib
import functools
import math

import numpy as np

from .proportion import _confidence_level_iv, clopper_pearson_interval, normal_quantile
from .results import Estimate
from .tables import _ones
from .weights import agreement_weights

_CI_METHOD = "analytic (Fleiss-Cohen-Everitt 1969)"
_TOL = 1e-12


# --------------------------------------------------------------------------- validation


def _categories_iv(k: int) -> int:
    if isinstance(k, bool) or int(k) != k or int(k) < 1:
        raise ValueError(f"the number of categories must be a positive integer, got {k!r}")
    return int(k)


def _codes_iv(codes: np.ndarray | list[int], k: int, name: str) -> np.ndarray:
    arr = np.asarray(codes)
    if arr.dtype.kind == "b" or arr.dtype.kind not in "iu":
        if arr.size == 0:
            arr = arr.astype(np.int64)
        else:
            raise TypeError(
                f"{name} must hold integer category codes (-1 = missing), got {arr.dtype}"
            )
    arr = arr.astype(np.int64, copy=False)
    if arr.size and (arr.min() < -1 or arr.max() >= k):
        raise ValueError(f"{name} holds codes outside -1 .. {k - 1}")
    return arr


def _table_iv(table: np.ndarray | list[list[int]]) -> np.ndarray:
    t = np.asarray(table)
    if t.ndim != 2 or t.shape[0] != t.shape[1] or t.shape[0] < 1:
        raise ValueError(f"the table must be square k×k, got shape {t.shape}")
    kind = t.dtype.kind
    if kind in "iu":
        if kind == "i" and t.min() < 0:
            raise ValueError("the table must hold non-negative whole counts")
        return t.astype(np.float64)
    if kind != "f":
        raise TypeError(f"the table must hold counts, got {t.dtype}")
    tf = t.astype(np.float64)
    if not (np.isfinite(tf.sum()) and bool(((tf >= 0.0) & (tf == np.floor(tf))).all())):
        raise ValueError("the table must hold non-negative whole counts")
    return tf


@functools.lru_cache(maxsize=64)
def _identity(k: int) -> np.ndarray:
    eye = np.eye(k)
    eye.flags.writeable = False
    return eye


def weights_iv(weights: np.ndarray | str | None, k: int) -> np.ndarray:
    """Agreement weights as a validated (k, k) float array.

    ``None`` means identity (unweighted); a string is a kind for
    :func:`reportgen.stats.weights.agreement_weights` built over the ``k`` declared categories;
    an array must be square k×k, symmetric, 1 on the diagonal and within [0, 1].
    """
    k = _categories_iv(k)
    if weights is None or (isinstance(weights, str) and weights == "identity"):
        return _identity(k)
    if weights is _identity(k):
        return weights
    if isinstance(weights, str):
        return agreement_weights(k, weights)  # type: ignore[arg-type]
    w = np.asarray(weights, dtype=np.float64)
    if w.shape != (k, k):
        raise ValueError(
            f"the weight matrix must be {k}×{k} (one row and column per declared category), "
            f"got shape {w.shape}"
        )
    if not np.all(np.isfinite(w)):
        raise ValueError("the weight matrix must hold finite numbers")
    if np.any(w < 0.0) or np.any(w > 1.0):
        raise ValueError("agreement weights must lie between 0 and 1")
    if np.any(np.abs(w - w.T) > _TOL):
        raise ValueError("the weight matrix must be symmetric (w[i, j] == w[j, i])")
    if np.any(np.abs(np.diag(w) - 1.0) > _TOL):
        raise ValueError(
            "the weight matrix must have 1 on its diagonal (a rating agrees fully with itself)"
        )
    w = (w + w.T) / 2.0
    np.fill_diagonal(w, 1.0)
    return w


def _is_identity(w: np.ndarray) -> bool:
    return w is _identity(w.shape[0]) or bool(np.array_equal(w, _identity(w.shape[0])))


# --------------------------------------------------------------------------- tables


def confusion_matrix(a: np.ndarray | list[int], b: np.ndarray | list[int], k: int) -> np.ndarray:
    """(k, k) int64 counts: rows are the codes in ``a``, columns those in ``b``.

    Only pairs where both codes are present (≥ 0) are counted.
    """
    k = _categories_iv(k)
    x = _codes_iv(a, k, "a").ravel()
    y = _codes_iv(b, k, "b").ravel()
    if x.shape != y.shape:
        raise ValueError(f"a and b must have the same length, got {x.size} and {y.size}")
    both = (x >= 0) & (y >= 0)
    return np.bincount(x[both] * k + y[both], minlength=k * k).reshape(k, k).astype(np.int64)


# --------------------------------------------------------------------------- bootstrap interface


def cohen_kappa_features(
    a: np.ndarray | list[int], b: np.ndarray | list[int], k: int
) -> np.ndarray:
    """(n_items, k²) float64 one-hot of each item's cell (a_i, b_i); zero row if either is missing."""
    k = _categories_iv(k)
    x = _codes_iv(a, k, "a").ravel()
    y = _codes_iv(b, k, "b").ravel()
    if x.shape != y.shape:
        raise ValueError(f"a and b must have the same length, got {x.size} and {y.size}")
    feats = np.zeros((x.size, k * k), dtype=np.float64)
    both = np.flatnonzero((x >= 0) & (y >= 0))
    feats[both, x[both] * k + y[both]] = 1.0
    return feats


@functools.lru_cache(maxsize=16)
def _margin_maps(k: int) -> tuple[np.ndarray, np.ndarray]:
    """(k², k) 0/1 matrices summing flattened k × k tables to their row and column margins."""
    eye, ones = np.eye(k), np.ones((k, 1))
    return np.kron(eye, ones), np.kron(ones, eye)


def _kappa_parts(
    tables: np.ndarray, w: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Kappa of (..., k, k) tables with validated weights, and the pieces it is made of.

    Returns (kappa, n, rows, cols, expected) with expected = n²(1 − p_e); kappa is NaN where
    expected == 0 (no items, or chance agreement 1).
    """
    d = 1.0 - w
    k = w.shape[0]
    if tables.ndim > 2 and tables.size >= 64 * k * k:
        # a batch (bootstrap replicates): small matrix products instead of reductions over
        # short axes, which numpy does slowly; the counts' sums are exact either way
        flat = tables.reshape(-1, k * k)
        to_rows, to_cols = _margin_maps(k)
        rows = (flat @ to_rows).reshape(tables.shape[:-1])
        cols = (flat @ to_cols).reshape(tables.shape[:-1])
        n = rows @ _ones(k)
        observed = (flat @ d.reshape(-1)).reshape(tables.shape[:-2])
        expected = ((rows @ d) * cols) @ _ones(k)
    else:
        rows = tables.sum(axis=-1)
        cols = tables.sum(axis=-2)
        n = rows.sum(axis=-1)
        observed = (tables * d).sum(axis=(-2, -1))  # n · (1 − p_o)
        expected = ((rows @ d) * cols).sum(axis=-1)  # n² · (1 − p_e)
    ratio = np.divide(
        n * observed, expected, out=np.full(np.shape(n), np.nan), where=expected > 0.0
    )
    return 1.0 - ratio, n, rows, cols, expected


def _kappa_from_tables(tables: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Kappa of (..., k, k) tables with validated agreement weights ``w``; NaN where undefined."""
    return _kappa_parts(tables, w)[0]


def cohen_kappa_from_sums(
    sums: np.ndarray, k: int, weights: np.ndarray | str | None = None
) -> np.ndarray:
    """Kappa from column sums of :func:`cohen_kappa_features`; ``sums`` has shape (..., k²).

    Returns an array of shape (...); NaN where kappa is undefined (no items, or chance
    agreement 1).

    Validated against: :func:`cohen_kappa` on each table (itself checked against Cohen 1960,
    FCE 1969 printouts, statsmodels and scikit-learn).
    """
    k = _categories_iv(k)
    s = np.asarray(sums, dtype=np.float64)
    if s.shape[-1:] != (k * k,):
        raise ValueError(f"sums must end in {k * k} columns (k² cells), got shape {s.shape}")
    return _kappa_from_tables(s.reshape(s.shape[:-1] + (k, k)), weights_iv(weights, k))


# --------------------------------------------------------------------------- point estimates


def _undefined(
    reason: str, *, n: int, agreeing: int, level: float, extra: dict[str, object]
) -> Estimate:
    return Estimate(
        estimate=None,
        ci_method=_CI_METHOD,
        confidence_level=level,
        items=n,
        agreeing=agreeing,
        warnings=(reason,),
        extra=extra,
    )


def cohen_kappa(
    table: np.ndarray | list[list[int]],
    *,
    weights: np.ndarray | str | None = None,
    confidence_level: float = 0.95,
) -> Estimate:
    """Cohen's kappa (weighted when ``weights`` is given) from a k×k table of counts.

    ``weights``: ``None`` (unweighted), ``"linear"`` / ``"quadratic"`` (built over all k declared
    categories) or a k×k agreement-weight matrix.  ``se`` is the FCE (1969) non-null SE used for
    the normal interval; ``z`` and ``p_value`` (two-sided) use the FCE null SE.  The interval is
    cut to [-1, 1] with a warning if it overshoots.  ``extra`` holds ``p_o``, ``p_e``,
    ``se_null``, ``z``, ``kappa_max`` (unweighted only, else None) and ``weighted``.

    Validated against: Cohen (1960) table (κ = .492); statsmodels' quoted printout for
    [[0,4,1],[0,8,0],[0,1,5]] (κ 0.4842, ASE 0.1380, CI 0.2137-0.7547, ASE₀ 0.1484, Z 3.2626;
    linear κ_w 0.4701, ASE 0.1457, ASE₀ 0.1426, Z 3.2971); Wikipedia's 50-proposal example
    (κ = 0.4); Feinstein & Cicchetti (1990) tables.
    """
    level = _confidence_level_iv(confidence_level)
    t = _table_iv(table)
    return _cohen_estimate(t, weights_iv(weights, t.shape[0]), level)


def _cohen_estimates(tables: np.ndarray, w: np.ndarray, level: float) -> list[Estimate]:
    """:func:`cohen_kappa` for each of a stack (m, k, k) of validated tables (e.g. rater pairs;
    never a loop over items).

    The kappas and their FCE (1969) variances are computed for the whole stack at once (the
    same formulas as :func:`_cohen_estimate`); only the records are built one table at a time.
    Tables where kappa is undefined go through :func:`_cohen_estimate` for its messages.
    """
    weighted = not _is_identity(w)
    m_tables, k = tables.shape[0], w.shape[0]
    if m_tables == 0:
        return []
    # Every table at once, as small 2-D matrix products over the flattened (m, k²) stack (numpy
    # reduces over short trailing axes slowly); the counts' sums are exact either way.
    flat = tables.reshape(m_tables, k * k)
    to_rows, to_cols = _margin_maps(k)
    rows_n = flat @ to_rows
    cols_n = flat @ to_cols
    n_arr = rows_n @ _ones(k)
    d = 1.0 - w
    observed = flat @ d.reshape(-1)  # n · (1 − p_o)
    expected = ((rows_n @ d) * cols_n) @ _ones(k)  # n² · (1 − p_e)
    n_list = n_arr.tolist()
    exp_list = expected.tolist()
    # empty tables or chance agreement 1 give NaN here; those records come from _cohen_estimate
    quiet = min(n_list) > 0 and min(exp_list) > 0
    with contextlib.nullcontext() if quiet else np.errstate(divide="ignore", invalid="ignore"):
        kappa_arr = 1.0 - n_arr * observed / expected
        n_b = n_arr[:, None]
        p = flat / n_b
        rows = rows_n / n_b
        cols = cols_n / n_b
        w_row = cols @ w  # w̄_i. = Σ_j w_ij p_.j (w is symmetric)
        w_col = rows @ w  # w̄_.j = Σ_i w_ij p_i.
        ones_kk = _ones(k * k)
        p_o = p @ w.reshape(-1)
        p_e = (rows * w_row) @ _ones(k)
        marg = (w_row[:, :, None] + w_col[:, None, :]).reshape(m_tables, k * k)
        w_flat = w.reshape(-1)
        q = 1.0 - p_e
        scale = n_arr * q * q
        dev = w_flat - marg * (1.0 - kappa_arr)[:, None]
        first = (p * dev * dev) @ ones_kk
        second = (kappa_arr - p_e * (1.0 - kappa_arr)) ** 2
        var = (first - second) / scale
        dev0 = w_flat - marg
        outer = (rows[:, :, None] * cols[:, None, :]).reshape(m_tables, k * k)
        first0 = (outer * dev0 * dev0) @ ones_kk
        second0 = p_e * p_e
        var0 = (first0 - second0) / scale
        diag_min = np.minimum(rows_n, cols_n) @ _ones(k)
        # A variance that is a difference of nearly equal terms (zero for perfect agreement, for
        # example) is rounding noise whose sign decides whether an interval or test is given;
        # such tables take the one-table path, whose arithmetic is the reference.
        fragile = (np.abs(first - second) <= 1e-6 * np.maximum(first, second)) | (
            np.abs(first0 - second0) <= 1e-6 * np.maximum(first0, second0)
        )
    agreeing = (flat[:, :: k + 1] @ _ones(k)).tolist()
    label = "Weighted kappa" if weighted else "Cohen's kappa"
    zq = normal_quantile(level)
    fragile_list = fragile.tolist()
    out = []
    for i, (kappa, n_f, exp_f, po, pe, v, v0, dmin) in enumerate(
        zip(
            kappa_arr.tolist(),
            n_list,
            exp_list,
            p_o.tolist(),
            p_e.tolist(),
            var.tolist(),
            var0.tolist(),
            diag_min.tolist(),
            strict=True,
        )
    ):
        if int(n_f) == 0 or not exp_f > 0.0 or fragile_list[i]:
            out.append(_cohen_estimate(tables[i], w, level, weighted=weighted))
            continue
        se = math.sqrt(max(v, 0.0))
        se0 = math.sqrt(max(v0, 0.0))
        kmax = None if weighted else 1.0 - n_f * (n_f - dmin) / exp_f
        out.append(
            _cohen_record(
                kappa, se, se0, po, pe, kmax, int(n_f), int(agreeing[i]), label, weighted, level, zq
            )
        )
    return out


def _cohen_record(
    kappa: float,
    se: float,
    se0: float,
    p_o: float,
    p_e: float,
    kmax: float | None,
    n: int,
    agreeing: int,
    label: str,
    weighted: bool,
    level: float,
    zq: float,
) -> Estimate:
    """The :class:`Estimate` of a defined kappa: test from ``se0``, interval from ``se``."""
    warnings: list[str] = []
    z: float | None = None
    p_value: float | None = None
    if se0 > 0.0:
        z = kappa / se0
        p_value = math.erfc(abs(z) / math.sqrt(2.0))
    else:
        warnings.append(f"No test of {label} = 0: its null standard error is zero for these data.")
    ci_low: float | None = None
    ci_high: float | None = None
    if se > 0.0:
        half = zq * se
        ci_low, ci_high = kappa - half, kappa + half
        if ci_low < -1.0 or ci_high > 1.0:
            warnings.append(f"The analytic interval of {label} was cut to the range -1 to 1.")
            ci_low, ci_high = max(ci_low, -1.0), min(ci_high, 1.0)
    else:
        warnings.append(
            f"No analytic interval for {label}: its standard error is zero for these data "
            "(for example perfect agreement); the large-sample interval does not apply."
        )
    return Estimate(
        estimate=kappa,
        se=se,
        ci_low=ci_low,
        ci_high=ci_high,
        ci_method=_CI_METHOD,
        confidence_level=level,
        z=z,
        p_value=p_value,
        items=n,
        agreeing=agreeing,
        warnings=tuple(warnings),
        extra={
            "weighted": weighted,
            "p_o": p_o,
            "p_e": p_e,
            "se_null": se0,
            "z": z,
            "kappa_max": kmax,
        },
    )


def _cohen_estimate(
    t: np.ndarray, w: np.ndarray, level: float, *, weighted: bool | None = None
) -> Estimate:
    """:func:`cohen_kappa` on a validated float table and validated weights."""
    if weighted is None:
        weighted = not _is_identity(w)
    label = "Weighted kappa" if weighted else "Cohen's kappa"
    # One code path with the bootstrap: the table is the column sum of the item features.
    kappa_arr, n_arr, rows_n, cols_n, expected = _kappa_parts(t, w)
    n_f = float(n_arr)
    n = int(n_f)
    agreeing = int(np.trace(t))
    extra: dict[str, object] = {"weighted": weighted}
    if n == 0:
        return _undefined(
            f"{label} is undefined: no item has both ratings.",
            n=0,
            agreeing=0,
            level=level,
            extra=extra,
        )
    p = t / n_f
    rows = rows_n / n_f
    cols = cols_n / n_f
    w_row = w @ cols  # w̄_i. = Σ_j w_ij p_.j
    w_col = rows @ w  # w̄_.j = Σ_i w_ij p_i.
    p_o = float((w * p).sum())
    p_e = float(rows @ w_row)
    extra.update(p_o=p_o, p_e=p_e)
    if not expected > 0.0:
        if weighted:
            why = (
                "every pair of categories the two ratings use gets full credit, "
                "so chance agreement is 1"
            )
        else:
            why = "both ratings put every item in the same category, so chance agreement is 1"
        extra.update(se_null=None, z=None, kappa_max=None)
        return _undefined(
            f"{label} is undefined: {why}.", n=n, agreeing=agreeing, level=level, extra=extra
        )
    kappa = float(kappa_arr)

    # Fleiss, Cohen & Everitt (1969), weighted form (identity weights give the unweighted one).
    marg = w_row[:, None] + w_col[None, :]
    q = 1.0 - p_e
    scale = n_f * q * q
    var = (
        _difference(
            float((p * (w - marg * (1.0 - kappa)) ** 2).sum()), (kappa - p_e * (1.0 - kappa)) ** 2
        )
        / scale
    )
    var0 = _difference(float((np.outer(rows, cols) * (w - marg) ** 2).sum()), p_e * p_e) / scale
    se = math.sqrt(max(var, 0.0))
    se0 = math.sqrt(max(var0, 0.0))
    kmax = None if weighted else _kappa_max_counts(n_f, rows_n, cols_n, float(expected))
    return _cohen_record(
        kappa, se, se0, p_o, p_e, kmax, n, agreeing, label, weighted, level, normal_quantile(level)
    )


def _kappa_max_counts(n: float, rows: np.ndarray, cols: np.ndarray, expected: float) -> float:
    """1 − n·(n − Σ min(n_i., n_.i)) / (n² − Σ n_i. n_.i); ``expected`` is the denominator."""
    return 1.0 - n * (n - float(np.minimum(rows, cols).sum())) / expected


def kappa_max(table: np.ndarray | list[list[int]]) -> float | None:
    """Largest unweighted kappa the table's margins allow (Cohen 1960): p_oM = Σ min(p_i., p_.i).

    ``None`` when kappa itself is undefined (no items, or chance agreement 1).

    Validated against: statsmodels ``kappa_max`` on Cohen's (1960) table (0.8305085) and random
    tables (test-only).
    """
    t = _table_iv(table)
    n = float(t.sum())
    if n == 0:
        return None
    rows = t.sum(axis=1)
    cols = t.sum(axis=0)
    expected = n * n - float(rows @ cols)  # n² (1 − p_e)
    if expected <= 0.0:
        return None
    return _kappa_max_counts(n, rows, cols, expected)


# --------------------------------------------------------------------------- binary 2×2 figures


def _binary_iv(table: np.ndarray | list[list[int]]) -> np.ndarray:
    t = _table_iv(table)
    if t.shape != (2, 2):
        raise ValueError(
            f"this figure is defined for a 2×2 (binary) table, got {t.shape[0]}×{t.shape[1]}"
        )
    return t


def pabak(
    table: np.ndarray | list[list[int]],
    *,
    confidence_level: float = 0.95,
) -> Estimate:
    """Prevalence- and bias-adjusted kappa of a 2×2 table, 2 p_o − 1 (Byrt, Bishop & Carlin 1993).

    The interval maps the exact (Clopper-Pearson) interval of p_o through 2p − 1; ``se`` is
    2√(p_o(1 − p_o)/n).

    Validated against: the Byrt, Bishop & Carlin (1993) identity
    κ = (PABAK − PI² + BI²)/(1 − PI² + BI²) and hand computation.
    """
    level = _confidence_level_iv(confidence_level)
    t = _binary_iv(table)
    n = int(t.sum())
    agree = int(np.trace(t))
    method = "exact (Clopper-Pearson 1934) on observed agreement, mapped by 2p - 1"
    if n == 0:
        return Estimate(
            estimate=None,
            ci_method=method,
            confidence_level=level,
            items=0,
            agreeing=0,
            warnings=("PABAK is undefined: no item has both ratings.",),
        )
    p_o = agree / n
    low, high = clopper_pearson_interval(agree, n, level)
    return Estimate(
        estimate=2.0 * p_o - 1.0,
        se=2.0 * math.sqrt(p_o * (1.0 - p_o) / n),
        ci_low=2.0 * low - 1.0,
        ci_high=2.0 * high - 1.0,
        ci_method=method,
        confidence_level=level,
        items=n,
        agreeing=agree,
        extra={"p_o": p_o},
    )


def prevalence_index(table: np.ndarray | list[list[int]]) -> float | None:
    """|a − d| / n for the 2×2 table [[a, b], [c, d]] (Byrt, Bishop & Carlin 1993); None if empty.

    Validated against: hand computation and the Byrt, Bishop & Carlin (1993) kappa identity.
    """
    t = _binary_iv(table)
    n = t.sum()
    return None if n == 0 else float(abs(t[0, 0] - t[1, 1]) / n)


def bias_index(table: np.ndarray | list[list[int]]) -> float | None:
    """|b − c| / n for the 2×2 table [[a, b], [c, d]] (Byrt, Bishop & Carlin 1993); None if empty.

    Validated against: hand computation and the Byrt, Bishop & Carlin (1993) kappa identity.
    """
    t = _binary_iv(table)
    n = t.sum()
    return None if n == 0 else float(abs(t[0, 1] - t[1, 0]) / n)


def _difference(first: float, second: float) -> float:
    """``first - second``, or exactly 0 where the two agree to rounding (a few ulps).

    A variance written as a difference of two nearly equal sums is rounding noise when the true
    variance is zero (for example one rater using a single category); left as it is, its sign and
    size (1e-16, so an SE of 1e-8) would depend on the machine's summation order.
    """
    diff = first - second
    return 0.0 if abs(diff) <= 64 * 2.220446049250313e-16 * max(abs(first), abs(second)) else diff
