"""Evaluation statistics for a handful of seeds per arm: interquartile mean, confidence intervals whose
coverage is measured, two-sample tests, Holm's adjustment and the probability of improvement.

An arm is summarised, as Agarwal et al. 2021 ("Deep RL at the edge of the statistical precipice", NeurIPS
2021, arXiv:2108.13264) advise, by its mean and its interquartile mean (IQM) with intervals, rather than by a
mean ± std that hides how few runs there are. With the 3–10 seeds of an arm the intervals must be ones
that keep their nominal coverage at such n, which the percentile bootstrap does not: resampling the seeds
of one arm covers the IQM of normal data only 73.9% of the time at 3 seeds, 89.3% at 5 and 92.6% at 10
for a nominal 95% (:data:`MEASURED_COVERAGE`, ``iqm_percentile_bootstrap``). So the intervals the report
prints are:

=========================  ====================================================  =========================
interval                   method                                                function
=========================  ====================================================  =========================
mean of one arm            Student t: mean ± t(n − 1) · s / √n                  :func:`t_interval`
IQM of one arm             trimmed-mean t (Tukey & McLaughlin 1963) with the     :func:`iqm_interval`
                           winsorised standard error of Yuen 1974, h − 1 d.f.
difference of two means    Welch t with Welch–Satterthwaite degrees of freedom   :func:`welch_interval`
learning-curve band        Student t of the mean at each step (pointwise)       :func:`mean_band`
=========================  ====================================================  =========================

Each is exact (the t intervals) or close to exact (Welch, trimmed t) for normal per-seed scores, and their
coverage is measured by simulation in :func:`coverage_table`; :data:`MEASURED_COVERAGE` holds the numbers
(the tests re-measure them), which the report prints. Scores far from normal (skewed, with outliers) can
cover less. :func:`stratified_bootstrap_ci` stays for data with several real strata (tasks, game variants)
resampled together, its use in Agarwal et al. 2021; on one arm it is a plain per-arm percentile bootstrap
and under-covers as above.

Conventions shared by every function:

* Scores are array-likes with one number per run (seed). NaN marks a missing or failed run and is dropped
  before anything is computed; ±inf is kept (a diverged run is a result) and propagates.
* A quantity that cannot be computed (no runs left, an interval from fewer than 2 runs, a test with too few
  runs) is NaN, never an exception. An argument out of range raises
  :class:`marl_core.errors.ConfigError` that names it.
* Randomness (the bootstrap, the coverage simulation) comes only from ``numpy.random`` generators built
  from a ``seed`` argument, so the same inputs and seed give the same result; global RNG state is never
  touched.
* Intervals are ``(low, high)`` tuples of floats; p-values are two-sided.

Only numpy and scipy are used (scipy is imported inside the functions that need it); this module does not
import torch or matplotlib.

Sources: docs/sources.md, "Interquartile mean and intervals" (IQM, bootstrap, probability of improvement);
docs/sources.md, "Student t / Welch intervals" (the t, trimmed-mean t and Welch intervals); and
docs/sources.md, "Rank tests and Holm's correction" (Mann–Whitney U, Holm).
"""

from __future__ import annotations

import functools
import math
import numbers
import warnings
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np

from marl_core.errors import ConfigError

__all__ = ["dip_and_recovery", "DIP_EARLY", "DIP_FINAL", "DIP_FACTOR", "iqm", "t_interval", "iqm_interval",
           "welch_interval", "mean_band", "stratified_bootstrap_ci",
           "summarize", "welch_p", "mannwhitney_p", "holm", "probability_of_improvement", "compare", "trend", "paired",
           "min_seeds_warning", "coverage_table", "INTERVAL_METHODS", "COVERAGE_KINDS", "COVERAGE_NS",
           "COVERAGE_TRIALS", "COVERAGE_BOOTSTRAP_TRIALS", "COVERAGE_BOOTSTRAP_REPS", "COVERAGE_SEED",
           "MEASURED_COVERAGE", "TESTS", "ALPHA"]

TESTS = ("mannwhitney", "welch")
"""Names accepted by ``compare(test=...)`` and ``min_seeds_warning(test=...)``."""

ALPHA = 0.05
"""Significance level the seed-count warnings are written against (common practice (no source))."""

_FEW_RUNS = 5  # below this many runs per arm the warnings speak up; common practice (no source)

INTERVAL_METHODS: dict[str, str] = {
    "mean": "Student t",
    "iqm": "trimmed-mean t (Tukey–McLaughlin, Yuen's winsorised standard error)",
    "difference": "Welch t",
    "curve": "Student t at each step (pointwise)",
    "iqm_percentile_bootstrap": "per-arm percentile bootstrap",
}
"""What each interval kind of :func:`coverage_table` is, in words (the report uses these names)."""


# ------------------------------------------------------------------------------------------------ helpers
def _runs(x: Any, name: str) -> np.ndarray:
    """``x`` as a 1-D float array with NaNs dropped (a scalar counts as one run)."""
    try:
        arr = np.asarray(x, dtype=float)
    except (TypeError, ValueError) as exc:
        raise ConfigError(f"{name} must be numbers (one score per run), got {x!r}: {exc}") from None
    if arr.ndim > 1:
        raise ConfigError(f"{name} must be 1-D (one score per run), got an array of shape {arr.shape}")
    arr = arr.reshape(-1)
    return arr[~np.isnan(arr)]


def _strata(scores: Any) -> list[np.ndarray]:
    """Split ``scores`` into strata: a 1-D array (or list of numbers) is one stratum, a list of 1-D arrays
    is one stratum per element. NaNs are dropped inside each stratum."""
    if isinstance(scores, np.ndarray):
        if scores.ndim > 1:
            raise ConfigError(
                f"scores must be a 1-D array (one stratum) or a list of 1-D arrays (one per stratum), got "
                f"an array of shape {scores.shape}; pass list(array) if its rows are the strata")
        return [_runs(scores, "scores")]
    if isinstance(scores, Sequence) and not isinstance(scores, (str, bytes)):
        dims = [np.ndim(s) for s in scores]
        if all(d == 0 for d in dims):
            return [_runs(scores, "scores")]
        if all(d >= 1 for d in dims):
            return [_runs(s, f"scores[{i}]") for i, s in enumerate(scores)]
        raise ConfigError(
            "scores must be a list of numbers (one stratum) or a list of 1-D arrays (one per stratum), got a "
            f"mix of numbers and arrays (element dimensions {dims})")
    return [_runs(scores, "scores")]


def _check_reps(reps: Any) -> int:
    if isinstance(reps, bool) or not isinstance(reps, numbers.Integral) or reps < 1:
        raise ConfigError(f"reps must be an integer >= 1 (number of bootstrap resamples), got {reps!r}")
    return int(reps)


def _check_confidence(confidence: Any) -> float:
    if (isinstance(confidence, bool) or not isinstance(confidence, numbers.Real)
            or not 0.0 < float(confidence) < 1.0):
        raise ConfigError(f"confidence must be a number strictly between 0 and 1, got {confidence!r}")
    return float(confidence)


def _generator(seed: Any) -> np.random.Generator:
    if seed is not None and (isinstance(seed, bool) or not isinstance(seed, numbers.Integral) or seed < 0):
        raise ConfigError(f"seed must be an integer >= 0 or None, got {seed!r}")
    return np.random.default_rng(seed)


def _check_test(test: Any) -> str:
    if test not in TESTS:
        raise ConfigError(f"test must be one of {', '.join(map(repr, TESTS))}, got {test!r}")
    return test


def _resample(strata: list[np.ndarray], reps: int, rng: np.random.Generator) -> list[np.ndarray]:
    """One (reps, n_k) resample per stratum: runs drawn with replacement within the stratum."""
    return [s[rng.integers(0, s.size, size=(reps, s.size))] for s in strata]


def _percentile_interval(values: np.ndarray, confidence: float) -> tuple[float, float]:
    tail = 100.0 * (1.0 - confidence) / 2.0
    low, high = np.percentile(values, [tail, 100.0 - tail])
    return float(low), float(high)


def _reduce(statistic: Callable[..., Any], samples: np.ndarray) -> np.ndarray:
    """``statistic(samples, axis=-1)`` checked to give one value per row."""
    out = np.asarray(statistic(samples, axis=-1), dtype=float)
    if out.shape != (samples.shape[0],):
        raise ConfigError(
            f"statistic must reduce the last axis like np.mean: statistic(samples of shape {samples.shape}, "
            f"axis=-1) returned shape {out.shape}, expected ({samples.shape[0]},)")
    return out


# ----------------------------------------------------------------------------------------- point summaries
def iqm(x: Any, axis: int | None = None) -> float | np.ndarray:
    """Interquartile mean: the mean of the middle 50% of the runs (Agarwal et al. 2021).

    The sorted runs lose ``floor(n / 4)`` values at each end and the rest are averaged, which is
    ``scipy.stats.trim_mean(x, 0.25)``. With fewer than 4 runs nothing is trimmed and the IQM is the mean.

    With ``axis=None`` (the default) ``x`` is flattened, NaNs are dropped and a float is returned (NaN if
    no runs are left). With an ``axis`` the IQM is taken along it, as numpy reductions do, so ``iqm`` can
    be handed to :func:`stratified_bootstrap_ci`; NaNs are then not dropped (rows would differ in length)
    and a slice containing NaN gives NaN.

    Shape: x: (...) with axis=None -> float; x: (..., n, ...) with axis -> the shape without that axis.
    """
    if axis is None:
        arr = np.asarray(x, dtype=float).reshape(-1)
        arr = arr[~np.isnan(arr)]
        if arr.size == 0:
            return float("nan")
        return float(_iqm_last(arr[None, :])[0])
    arr = np.moveaxis(np.asarray(x, dtype=float), axis, -1)
    if arr.shape[-1] == 0:
        return np.full(arr.shape[:-1], np.nan)
    out = _iqm_last(arr)
    return np.where(np.isnan(arr).any(axis=-1), np.nan, out)


def _iqm_last(arr: np.ndarray) -> np.ndarray:
    n = arr.shape[-1]
    cut = n // 4  # = int(0.25 * n), the cut scipy.stats.trim_mean makes at each end
    return np.sort(arr, axis=-1)[..., cut:n - cut].mean(axis=-1)


# -------------------------------------------------------------------------------------- analytic intervals
@functools.lru_cache(maxsize=512)
def _t_quantile_int(confidence: float, df: int) -> float:
    from scipy import stats

    return float(stats.t.ppf(0.5 + confidence / 2.0, df))


def _t_quantile(confidence: float, df: Any) -> Any:
    """The two-sided ``confidence`` quantile of Student's t with ``df`` degrees of freedom (NaN for df <= 0),
    ``scipy.stats.t.ppf((1 + confidence) / 2, df)``; ``df`` may be an array. A single whole df is cached
    (scipy's call costs far more than the rest of an interval)."""
    df = np.asarray(df, dtype=float)
    if df.ndim == 0 and math.isfinite(float(df)) and df >= 1 and float(df).is_integer():
        return np.float64(_t_quantile_int(confidence, int(df)))
    from scipy import stats

    with np.errstate(invalid="ignore"):
        return stats.t.ppf(0.5 + confidence / 2.0, np.where(df > 0, df, np.nan))


def mean_band(values: Any, confidence: float = 0.95) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Mean over seeds and its Student t interval, column by column: the learning-curve band.

    ``values`` has one row per seed and one column per step (or per anything else). In each column the NaN
    values are dropped, leaving ``n`` seeds, and the interval is ``mean ± t · s / √n`` with ``s`` the
    sample standard deviation (``ddof=1``) and ``t`` the ``(1 + confidence) / 2`` quantile of Student's t
    with ``n - 1`` degrees of freedom (``scipy.stats.t.ppf``) — the textbook interval of a normal mean
    with unknown variance, exact for normal scores at any n >= 2. The band is pointwise: each column covers
    its own mean with probability ``confidence``; the whole curve at once is covered less often.

    A column with fewer than 2 seeds left has a NaN interval (its mean is still given; NaN with none).
    A column of equal values has a zero-width interval. :func:`t_interval` is this function on one column.

    Shape: values: (n_seeds, T) -> mean, low, high: (T,) each (a 1-D input is one column: shapes ()).
    """
    confidence = _check_confidence(confidence)
    try:
        arr = np.asarray(values, dtype=float)
    except (TypeError, ValueError) as exc:
        raise ConfigError(f"values must be numbers (one row per seed), got {values!r}: {exc}") from None
    if arr.ndim == 0 or arr.ndim > 2:
        raise ConfigError(f"values must be 1-D (seeds) or 2-D (seeds x steps), got an array of shape "
                          f"{arr.shape}")
    ok = ~np.isnan(arr)
    n = ok.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        total = np.where(ok, arr, 0.0).sum(axis=0)
        mean = np.where(n > 0, total / np.maximum(n, 1), np.nan)
        dev = np.where(ok, arr - mean, 0.0)
        sd = np.sqrt((dev ** 2).sum(axis=0) / (n - 1))
        half = _t_quantile(confidence, n - 1) * sd / np.sqrt(n)
        half = np.where(n >= 2, half, np.nan)
        return mean, mean - half, mean + half


def t_interval(x: Any, confidence: float = 0.95) -> tuple[float, float]:
    """Student's t interval of the mean of ``x``: ``mean ± t(n − 1) · s / √n`` (NaNs dropped).

    ``s`` is the sample standard deviation (``ddof=1``) and ``t(n − 1)`` the ``(1 + confidence) / 2``
    quantile of Student's t with ``n - 1`` degrees of freedom; it equals
    ``scipy.stats.ttest_1samp(x, 0).confidence_interval(confidence)``. Exact for normal scores at any
    ``n >= 2``; with fewer than 2 runs the interval is ``(nan, nan)``, with equal runs it is ``(x, x)``,
    and an infinite run makes it ``(nan, nan)`` (the spread is undefined).
    """
    confidence = _check_confidence(confidence)
    _, low, high = mean_band(_runs(x, "x"), confidence)
    return float(low), float(high)


def _trimmed_t_rows(x: np.ndarray, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """The trimmed-mean t interval of every row of ``x`` (no NaNs, n >= 2 columns). Shape (k, n) -> (k,)."""
    n = x.shape[-1]
    g = n // 4  # the IQM's cut at each end, as in iqm()
    h = n - 2 * g  # runs left after trimming
    s = np.sort(x, axis=-1)
    w = s.copy()  # winsorised: the g lowest set to the (g+1)-th lowest, the g highest to the (g+1)-th highest
    if g:
        w[..., :g] = s[..., [g]]
        w[..., n - g:] = s[..., [n - g - 1]]
    with np.errstate(invalid="ignore"):
        se = np.sqrt(np.var(w, axis=-1, ddof=1) * (n - 1) / (h * (h - 1)))
        centre = s[..., g:n - g].mean(axis=-1)
        half = _t_quantile(confidence, h - 1) * se
    return centre - half, centre + half


def iqm_interval(x: Any, confidence: float = 0.95) -> tuple[float, float]:
    """Trimmed-mean t interval of the IQM of ``x`` (Tukey & McLaughlin 1963; Yuen 1974), NaNs dropped.

    With ``g = floor(n / 4)`` runs cut at each end (the IQM's cut) and ``h = n - 2g`` left, the interval is
    ``IQM ± t(h − 1) · sqrt((n − 1) s_w² / (h (h − 1)))``, where ``s_w²`` is the variance (``ddof=1``) of
    the winsorised runs (the g lowest set to the (g+1)-th lowest, the g highest to the (g+1)-th highest).
    This is the one-sample form of Yuen's trimmed t; it equals ``scipy.stats.ttest_ind(x, c,
    trim=0.25, equal_var=False).confidence_interval(confidence)`` shifted by ``c`` for a constant ``c``.
    Below 4 runs nothing is trimmed and it is :func:`t_interval`.

    It covers the IQM of a symmetric distribution (which is its mean) near the nominal level already at 5
    seeds, where a per-arm percentile bootstrap of the IQM covers far less; see :data:`MEASURED_COVERAGE`.
    With fewer than 2 runs the interval is ``(nan, nan)``.
    """
    confidence = _check_confidence(confidence)
    runs = _runs(x, "x")
    if runs.size < 2:
        return float("nan"), float("nan")
    low, high = _trimmed_t_rows(runs[None, :], confidence)
    return float(low[0]), float(high[0])


def _welch_rows(a: np.ndarray, b: np.ndarray, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Welch's interval of mean(a) - mean(b) row by row (no NaNs, >= 2 columns each). (k, n), (k, m) -> (k,)."""
    n, m = a.shape[-1], b.shape[-1]
    va, vb = np.var(a, axis=-1, ddof=1) / n, np.var(b, axis=-1, ddof=1) / m
    with np.errstate(invalid="ignore", divide="ignore"):
        df = (va + vb) ** 2 / (va ** 2 / (n - 1) + vb ** 2 / (m - 1))
    df = np.where(np.isnan(df), 1.0, df)  # both sides constant: se = 0, any df gives (d, d) (as scipy does)
    d = a.mean(axis=-1) - b.mean(axis=-1)
    with np.errstate(invalid="ignore"):
        half = _t_quantile(confidence, df) * np.sqrt(va + vb)
    return d - half, d + half


def welch_interval(a: Any, b: Any, confidence: float = 0.95) -> tuple[float, float]:
    """Welch's t interval of ``mean(a) - mean(b)`` (unequal variances; NaNs dropped).

    ``d ± t(ν) · sqrt(s_a² / n + s_b² / m)`` with the Welch–Satterthwaite degrees of freedom
    ``ν = (s_a²/n + s_b²/m)² / ((s_a²/n)² / (n − 1) + (s_b²/m)² / (m − 1))``; it equals
    ``scipy.stats.ttest_ind(a, b, equal_var=False).confidence_interval(confidence)``. Close to nominal for
    normal scores even at 3 seeds a side (see :data:`MEASURED_COVERAGE`). With fewer than 2 runs on a side
    the interval is ``(nan, nan)``; with both sides constant it is ``(d, d)``.
    """
    confidence = _check_confidence(confidence)
    ra, rb = _runs(a, "a"), _runs(b, "b")
    if ra.size < 2 or rb.size < 2:
        return float("nan"), float("nan")
    low, high = _welch_rows(ra[None, :], rb[None, :], confidence)
    return float(low[0]), float(high[0])


# -------------------------------------------------------------------------------------------- bootstrap
def stratified_bootstrap_ci(scores: Any, statistic: Callable[..., Any], reps: int = 2000,
                            confidence: float = 0.95, seed: int | None = 0) -> tuple[float, float]:
    """Percentile bootstrap interval of ``statistic`` over pooled runs, resampled within strata
    (Agarwal et al. 2021).

    ``scores`` is a list of 1-D arrays holding one stratum (task, game variant) each, with the runs of that
    stratum as elements; strata may differ in size. A single 1-D array (or list of numbers) is one stratum,
    and then this is a plain percentile bootstrap of one sample, not a stratified one. A 2-D ndarray is
    rejected because its orientation (tasks × runs or runs × tasks) is ambiguous. NaNs are dropped within
    each stratum first; a stratum left empty is skipped, and with no runs at all the interval is
    ``(nan, nan)``.

    Each of the ``reps`` resamples draws, independently in every stratum, as many runs as the stratum has,
    with replacement; the strata are concatenated and ``statistic`` is applied to the pooled resample.
    The interval is the ``(1 - confidence) / 2`` and ``(1 + confidence) / 2`` percentiles of the ``reps``
    values. When every stratum has one run (in particular, a single run x) every resample is the data and
    the interval collapses to ``(statistic(data), statistic(data))``, i.e. ``(x, x)`` for mean or IQM.

    ``statistic`` must reduce the last axis like a numpy reduction: it is called once as
    ``statistic(samples, axis=-1)`` with ``samples`` of shape ``(reps, N)`` (N = pooled number of runs)
    and must return shape ``(reps,)``; ``np.mean``, ``np.median`` and :func:`iqm` qualify. Memory is
    ``O(reps * N)``. Randomness comes from ``numpy.random.default_rng(seed)`` only.

    The percentile bootstrap under-covers at small n: a nominal 95% interval of the IQM of one arm's normal
    scores covers 73.9% at 3 seeds, 89.3% at 5 and 92.6% at 10 (:data:`MEASURED_COVERAGE`);
    :func:`t_interval`, :func:`iqm_interval` and :func:`welch_interval` are the intervals to use there.
    """
    reps = _check_reps(reps)
    confidence = _check_confidence(confidence)
    if not callable(statistic):
        raise ConfigError(f"statistic must be callable like np.mean(samples, axis=-1), got {statistic!r}")
    rng = _generator(seed)
    strata = [s for s in _strata(scores) if s.size]
    if not strata:
        return float("nan"), float("nan")
    if all(s.size == 1 for s in strata):
        value = float(_reduce(statistic, np.concatenate(strata)[None, :])[0])
        return value, value
    pooled = np.concatenate(_resample(strata, reps, rng), axis=1)
    return _percentile_interval(_reduce(statistic, pooled), confidence)


def summarize(x: Any, reps: int = 2000, seed: int | None = 0, confidence: float = 0.95) -> dict[str, Any]:
    """Point estimates and intervals of one arm's runs (NaNs dropped).

    Returns ``{"n", "mean", "mean_ci", "iqm", "iqm_ci", "std"}``: ``n`` is the number of runs kept,
    ``mean_ci`` is :func:`t_interval` (Student t) of the mean, ``iqm_ci`` is :func:`iqm_interval`
    (trimmed-mean t) of the IQM, both at ``confidence``, and ``std`` is the sample standard deviation
    (``ddof=1``; NaN with fewer than 2 runs). With fewer than 2 runs both intervals are ``(nan, nan)``;
    with no runs every value but ``n = 0`` is NaN.

    ``reps`` and ``seed`` are checked and otherwise unused: no interval here resamples any more. They are
    kept so that calls written for the earlier bootstrap version still work.
    """
    _check_reps(reps)
    _generator(seed)
    confidence = _check_confidence(confidence)
    runs = _runs(x, "x")
    n = int(runs.size)
    if n == 0:
        nan = float("nan")
        return {"n": 0, "mean": nan, "mean_ci": (nan, nan), "iqm": nan, "iqm_ci": (nan, nan), "std": nan}
    return {
        "n": n,
        "mean": float(np.mean(runs)),
        "mean_ci": t_interval(runs, confidence),
        "iqm": iqm(runs),
        "iqm_ci": iqm_interval(runs, confidence),
        "std": float(np.std(runs, ddof=1)) if n >= 2 else float("nan"),
    }


# ------------------------------------------------------------------------------------------------- tests
def welch_p(a: Any, b: Any) -> float:
    """Two-sided p-value of Welch's unequal-variance t-test (``scipy.stats.ttest_ind(equal_var=False)``).

    NaNs are dropped first. The p-value is NaN when either side has fewer than 2 runs left, and NaN when
    both sides are constant with the same value (0 / 0: the data say nothing). When both sides are
    constant with different values the t statistic is infinite and the p-value is 0.0 (what scipy returns
    too, here without its precision-loss warning).
    """
    a, b = _runs(a, "a"), _runs(b, "b")
    if a.size < 2 or b.size < 2:
        return float("nan")
    a_const, b_const = bool(a.max() == a.min()), bool(b.max() == b.min())
    if a_const and b_const:
        return float("nan") if a[0] == b[0] else 0.0
    from scipy import stats

    with warnings.catch_warnings():
        if a_const or b_const:  # an exactly constant side is fine for Welch; scipy warns about it anyway
            warnings.filterwarnings("ignore", message="Precision loss", category=RuntimeWarning)
        return float(stats.ttest_ind(a, b, equal_var=False).pvalue)


def mannwhitney_p(a: Any, b: Any) -> float:
    """Two-sided p-value of the Mann–Whitney U test (``scipy.stats.mannwhitneyu(a, b,
    alternative="two-sided")`` with scipy's default ``method="auto"``: exact when one sample has at most 8
    runs and there are no ties, normal approximation with tie and continuity corrections otherwise).

    NaNs are dropped first; NaN when either side is empty.
    """
    a, b = _runs(a, "a"), _runs(b, "b")
    if a.size == 0 or b.size == 0:
        return float("nan")
    from scipy import stats

    return float(stats.mannwhitneyu(a, b, alternative="two-sided").pvalue)


def holm(pvalues: Any) -> np.ndarray:
    """Holm's step-down adjustment of a family of p-values (Holm 1979), in the input order.

    The m p-values are sorted ascending, the i-th smallest (1-based) is multiplied by ``m - i + 1``, a
    running maximum makes the sequence non-decreasing, values are clipped to 1 and put back in the input
    order. Rejecting where the adjusted value is ``<= alpha`` controls the family-wise error rate at alpha.

    NaN entries (tests that could not be run) are passed through as NaN and are not counted in m.
    Values outside [0, 1] raise :class:`ConfigError`. Shape: (m,) -> (m,) float.
    """
    p = np.asarray(pvalues, dtype=float)
    if p.ndim > 1:
        raise ConfigError(f"pvalues must be 1-D, got an array of shape {p.shape}")
    p = p.reshape(-1)
    known = ~np.isnan(p)
    bad = np.flatnonzero(known & ((p < 0.0) | (p > 1.0)))
    if bad.size:
        raise ConfigError(f"pvalues must lie in [0, 1] (NaN allowed), got {p[bad[0]]!r} at index {bad[0]}")
    out = np.full(p.shape, np.nan)
    q = p[known]
    m = q.size
    if m:
        order = np.argsort(q, kind="stable")
        stepped = np.minimum(np.maximum.accumulate(q[order] * (m - np.arange(m))), 1.0)
        adjusted = np.empty(m)
        adjusted[order] = stepped
        out[known] = adjusted
    return out


def probability_of_improvement(x: Any, y: Any) -> float:
    """``P(X > Y) + P(X = Y) / 2`` for a random run X of ``x`` and Y of ``y``, estimated over all n·m pairs
    as ``U / (n m)`` with U the Mann–Whitney statistic of ``x`` against ``y`` (Agarwal et al. 2021).

    U counts the pairs where x wins plus half the ties; it equals the statistic
    ``scipy.stats.mannwhitneyu(x, y)`` reports for its first sample. 0.5 means neither arm tends to beat
    the other; 1.0 means every run of ``x`` beats every run of ``y``. NaNs are dropped; NaN when either
    side is empty. Computed by sorting (``O((n + m) log m)``), not by forming the n·m pairs.
    """
    x, y = _runs(x, "x"), _runs(y, "y")
    if x.size == 0 or y.size == 0:
        return float("nan")
    ys = np.sort(y)
    below = np.searchsorted(ys, x, side="left")  # runs of y strictly below each x
    not_above = np.searchsorted(ys, x, side="right")  # runs of y at or below each x
    u = below.sum() + 0.5 * (not_above - below).sum()
    return float(u / (x.size * y.size))


def compare(arm: Any, baseline: Any, test: str = "mannwhitney", *, reps: int = 2000,
            confidence: float = 0.95, seed: int | None = 0) -> dict[str, Any]:
    """Compare one arm's runs against a baseline's.

    Returns a dict with

    * ``difference``: ``mean(arm) - mean(baseline)``;
    * ``difference_ci``: :func:`welch_interval` (Welch t) of that difference at ``confidence``; NaN with
      fewer than 2 runs on a side;
    * ``p_value``: two-sided, :func:`mannwhitney_p` (``test="mannwhitney"``, the default: no normality
      assumed) or :func:`welch_p` (``test="welch"``). The interval and a Mann–Whitney p-value come from
      different methods and can disagree at few seeds (at 3 seeds a side Mann–Whitney cannot reach
      p < 0.05, while the Welch interval can exclude 0);
    * ``test``: the name passed in;
    * ``prob_improvement``: :func:`probability_of_improvement` of arm over baseline;
    * ``n_arm``, ``n_baseline``: runs kept after dropping NaNs;
    * ``warning``: :func:`min_seeds_warning` for those counts (None when the counts are adequate).

    With no runs on a side, the difference, its interval and the probability of improvement are NaN.
    Adjust the p-values of several arms against one baseline together with :func:`holm`. ``reps`` and
    ``seed`` are checked and otherwise unused (the interval no longer resamples); they are kept so that
    earlier calls still work.
    """
    test = _check_test(test)
    _check_reps(reps)
    confidence = _check_confidence(confidence)
    _generator(seed)
    a, b = _runs(arm, "arm"), _runs(baseline, "baseline")
    nan = float("nan")
    difference = float(np.mean(a) - np.mean(b)) if a.size and b.size else nan
    p_value = mannwhitney_p(a, b) if test == "mannwhitney" else welch_p(a, b)
    return {
        "difference": difference,
        "difference_ci": welch_interval(a, b, confidence),
        "p_value": p_value,
        "test": test,
        "prob_improvement": probability_of_improvement(a, b),
        "n_arm": int(a.size),
        "n_baseline": int(b.size),
        "warning": min_seeds_warning(int(a.size), int(b.size), test),
    }


def paired(x: Any, y: Any, confidence: float = 0.95) -> dict[str, Any]:
    """The paired difference ``x - y`` (one pair per run, e.g. the learned team and a scripted team measured
    on the same evaluation episodes of the run): its mean, :func:`t_interval` and the two-sided p of the
    one-sample t-test of the differences against 0 (``scipy.stats.ttest_1samp``; the paired t-test).

    Pairs with a NaN are dropped. With fewer than 2 pairs the interval and p are NaN; with every
    difference equal, p is 0.0 when that difference is not 0 and NaN when it is.
    """
    confidence = _check_confidence(confidence)
    xs, ys = np.asarray(x, dtype=float).ravel(), np.asarray(y, dtype=float).ravel()
    if xs.shape != ys.shape:
        raise ConfigError(f"paired: x and y must pair up; got {xs.size} and {ys.size} values")
    d = (xs - ys)[np.isfinite(xs) & np.isfinite(ys)]
    nan = float("nan")
    if d.size == 0:
        return {"n": 0, "difference": nan, "difference_ci": (nan, nan), "p_value": nan}
    out = {"n": int(d.size), "difference": float(d.mean()), "difference_ci": t_interval(d, confidence)}
    if d.size < 2:
        return {**out, "p_value": nan}
    if d.max() == d.min():
        return {**out, "p_value": nan if d[0] == 0 else 0.0}
    from scipy import stats as sps

    return {**out, "p_value": float(sps.ttest_1samp(d, 0.0).pvalue)}


def trend(x: Any, y: Any) -> dict[str, Any]:
    """A monotone trend of ``y`` along ``x`` (one pair per run): Spearman's rank correlation.

    Returns ``{"n", "rho", "p_value"}``: ``rho`` is Pearson's correlation of the ranks (ties get their mean
    rank), ``p_value`` the two-sided p of the t statistic ``rho * sqrt((n - 2) / (1 - rho^2))`` with
    ``n - 2`` degrees of freedom, which is what ``scipy.stats.spearmanr`` returns. Rank-based, so it
    asks only whether y tends to rise or fall as x rises, not whether the change is linear (axes such as
    a scale of 0.25, 0.5, 1, 2, 4 are not evenly spaced). Pairs with a NaN are dropped; with fewer than 3
    pairs left, or no spread in x or in y, ``rho`` and ``p_value`` are NaN.
    """
    xs, ys = np.asarray(x, dtype=float).ravel(), np.asarray(y, dtype=float).ravel()
    if xs.shape != ys.shape:
        raise ConfigError(f"trend: x and y must pair up; got {xs.size} and {ys.size} values")
    keep = np.isfinite(xs) & np.isfinite(ys)
    xs, ys = xs[keep], ys[keep]
    n = int(xs.size)
    nan = float("nan")
    if n < 3 or np.ptp(xs) == 0 or np.ptp(ys) == 0:
        return {"n": n, "rho": nan, "p_value": nan}
    from scipy import stats as sps

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = sps.spearmanr(xs, ys)
    return {"n": n, "rho": float(result.statistic), "p_value": float(result.pvalue)}


#: the dip-and-recovery test's windows (fractions of a run's env steps) and its noise factor (ours, no
#: source); docs/studies.md, "Findings over training", defines the test
DIP_EARLY, DIP_FINAL, DIP_FACTOR = 0.15, 0.85, 3.0
#: the fewest evaluations a curve needs for the test
DIP_MIN_POINTS = 10


def dip_and_recovery(steps: Any, values: Any, early: float = DIP_EARLY, final: float = DIP_FINAL,
                     factor: float = DIP_FACTOR) -> dict[str, float] | None:
    """One seed's dip-and-recovery on one measure's evaluation curve (higher is better), as docs/studies.md,
    "Findings over training", defines it.

    With T the last step: E = mean of the evaluations at t <= ``early``·T, F = mean of those at
    t >= ``final``·T, M = the minimum over the evaluations between of the 3-point running mean (each
    averaged with its two neighbours); d1 = E - M (the dip), d2 = F - M (the recovery). One evaluation's
    noise is ``sigma`` = sd(successive differences)/sqrt(2) (von Neumann), a 3-point mean's
    ``sigma3`` = sigma/sqrt(3); ``shows`` is 1.0 when d1 and d2 both exceed ``factor``·sigma3, else 0.0.

    Returns None when the curve cannot be judged: fewer than :data:`DIP_MIN_POINTS` finite evaluations, or
    an empty window (NaN evaluations are dropped first)."""
    t = np.asarray(steps, dtype=float)
    x = np.asarray(values, dtype=float)
    if t.shape != x.shape or t.ndim != 1:
        raise ConfigError(f"dip_and_recovery: steps and values must be 1-D of one length; got shapes "
                          f"{t.shape} and {x.shape}")
    keep = np.isfinite(x) & np.isfinite(t)
    t, x = t[keep], x[keep]
    order = np.argsort(t, kind="stable")
    t, x = t[order], x[order]
    if x.size < DIP_MIN_POINTS:
        return None
    total = t[-1]
    first, last = t <= early * total, t >= final * total
    middle = np.flatnonzero(~first & ~last)
    # every middle point has both neighbours on the curve: the windows are not empty
    if not first.any() or not last.any() or middle.size == 0:
        return None
    smooth = np.array([x[i - 1:i + 2].mean() for i in middle])
    e, f, m = float(x[first].mean()), float(x[last].mean()), float(smooth.min())
    sigma = float(np.std(np.diff(x), ddof=1) / math.sqrt(2.0))
    sigma3 = sigma / math.sqrt(3.0)
    d1, d2 = e - m, f - m
    shows = float(d1 > factor * sigma3 and d2 > factor * sigma3)
    return {"early": e, "final": f, "dip": m, "d1": d1, "d2": d2, "sigma": sigma, "sigma3": sigma3,
            "shows": shows, "at": float(t[middle[int(np.argmin(smooth))]])}


def min_seeds_warning(n_arm: int, n_base: int, test: str) -> str | None:
    """A plain-language warning when ``n_arm`` and ``n_base`` runs are too few for ``test``, else None.

    * ``"mannwhitney"``: the most extreme split of n + m runs has probability ``1 / C(n + m, n)`` in each
      tail, so the smallest two-sided exact p-value is ``2 / C(n + m, n)``; when it exceeds :data:`ALPHA`
      (0.05) no difference, however large, can be significant. At n = m = 3 it is 2 / C(6, 3) = 0.1; at
      n = m = 4 it is 2 / 70 ≈ 0.029. (scipy's normal approximation, used with ties, gives similar bounds.)
    * ``"welch"``: warns with fewer than 5 runs on a side, a common threshold (common practice (no
      source)); with fewer than 2 the p-value is undefined.
    * Either test: with fewer than 5 runs on a side, notes that the intervals are very wide and lean on
      normal scores.

    The messages are joined into one string.
    """
    for name, value in (("n_arm", n_arm), ("n_base", n_base)):
        if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < 0:
            raise ConfigError(f"{name} must be an integer >= 0 (number of runs), got {value!r}")
    test = _check_test(test)
    n, m = int(n_arm), int(n_base)
    if n == 0 or m == 0:
        return f"No runs on one side (n_arm = {n}, n_base = {m}): nothing can be compared."
    notes = []
    if test == "mannwhitney":
        p_min = min(1.0, 2.0 / math.comb(n + m, n))
        if p_min > ALPHA:
            notes.append(
                f"With {n} and {m} seeds the smallest two-sided p-value an exact Mann–Whitney test can give "
                f"is {p_min:.3g} (2 / C({n + m}, {n})), so no difference can reach p < {ALPHA:g}, however "
                f"large it is; n = m = 4 is the smallest balanced design that can (2 / C(8, 4) ≈ 0.029).")
    elif min(n, m) < 2:
        notes.append(f"Welch's t-test needs at least 2 runs per side (n_arm = {n}, n_base = {m}); its "
                     "p-value is undefined.")
    elif min(n, m) < _FEW_RUNS:
        notes.append(
            f"Welch's t-test with fewer than {_FEW_RUNS} seeds per arm (n_arm = {n}, n_base = {m}) rests on "
            f"the scores being roughly normal, which so few runs cannot check; {_FEW_RUNS} per arm is a "
            "common minimum (common practice, no source).")
    if min(n, m) < _FEW_RUNS:
        notes.append(
            f"With fewer than {_FEW_RUNS} runs on a side the t intervals are very wide (the t quantile "
            "grows fast as seeds drop: 4.30 at 3 seeds against 2.78 at 5) and lean on the scores being "
            "roughly normal; read them as rough.")
    return " ".join(notes) or None




# ------------------------------------------------------------------------------------------------ coverage
COVERAGE_KINDS: tuple[str, ...] = ("mean", "iqm", "difference", "curve", "iqm_percentile_bootstrap")
"""The interval kinds :func:`coverage_table` measures: the four the report prints, and the per-arm percentile
bootstrap of the IQM that the report used before, for comparison."""

COVERAGE_NS: tuple[int, ...] = (3, 5, 10)
"""Seeds per arm at which :data:`MEASURED_COVERAGE` is measured."""

COVERAGE_TRIALS = 20000
"""Simulated data sets per interval kind and n (binomial sd of a coverage near 0.95: 0.0015)."""

COVERAGE_BOOTSTRAP_TRIALS = 2000
"""Simulated data sets for the bootstrap kind, which is slower (binomial sd near 0.9: 0.007)."""

COVERAGE_BOOTSTRAP_REPS = 500
"""Bootstrap resamples per interval in the coverage simulation of the bootstrap kind."""

COVERAGE_SEED = 2024
"""Seed of the coverage simulation behind :data:`MEASURED_COVERAGE`."""

_CURVE_STEPS = 8  # steps per simulated learning curve
_DIFFERENCE_SD = (2.0, 1.0)  # standard deviations of the arm and the baseline in the simulated comparison


def _check_ns(ns: Any) -> tuple[int, ...]:
    ok = (isinstance(ns, Sequence) and not isinstance(ns, (str, bytes)) and len(ns) > 0
          and all(isinstance(n, numbers.Integral) and not isinstance(n, bool) and n >= 2 for n in ns))
    if not ok:
        raise ConfigError(f"ns must be a non-empty list of integers >= 2 (seeds per arm), got {ns!r}")
    return tuple(int(n) for n in ns)


def _check_count(value: Any, name: str) -> int:
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < 1:
        raise ConfigError(f"{name} must be an integer >= 1 (simulated data sets), got {value!r}")
    return int(value)


def _check_kinds(kinds: Any) -> tuple[str, ...]:
    if (isinstance(kinds, (str, bytes)) or not isinstance(kinds, Sequence)
            or any(k not in COVERAGE_KINDS for k in kinds)):
        raise ConfigError(f"kinds must be a list drawn from {', '.join(map(repr, COVERAGE_KINDS))}, got "
                          f"{kinds!r}")
    return tuple(kinds)


def _hits(low: np.ndarray, high: np.ndarray, truth: float | np.ndarray) -> float:
    return float(np.mean((low <= truth) & (truth <= high)))


def coverage_table(ns: Sequence[int] = COVERAGE_NS, trials: int = COVERAGE_TRIALS, seed: int = COVERAGE_SEED,
                   confidence: float = 0.95, kinds: Sequence[str] = COVERAGE_KINDS,
                   bootstrap_trials: int = COVERAGE_BOOTSTRAP_TRIALS,
                   bootstrap_reps: int = COVERAGE_BOOTSTRAP_REPS) -> dict[str, dict[int, float]]:
    """Measured coverage of each interval kind at each number of seeds, by simulation on normal data.

    For every kind and every n in ``ns``, ``trials`` data sets are drawn and the fraction of intervals
    (nominal ``confidence``) that contain the true value is returned as ``{kind: {n: coverage}}``:

    * ``"mean"``: n draws of N(0, 1), :func:`t_interval` (computed as :func:`mean_band`, which it is);
      truth 0.
    * ``"iqm"``: n draws of N(0, 1), :func:`iqm_interval`; truth 0, because the IQM of a symmetric
      distribution (the mean of its middle 50%) equals its mean.
    * ``"difference"``: n draws of N(0, 2²) for the arm and n of N(0, 1) for the baseline (unequal
      variances, what Welch's interval is for), :func:`welch_interval`; truth 0.
    * ``"curve"``: n learning curves of 8 steps, each the curve 0, 1, ..., 7 plus a random walk of N(0, 1)
      increments (so steps of one seed are correlated and later steps noisier), :func:`mean_band`; the
      coverage is pointwise, over all steps and trials.
    * ``"iqm_percentile_bootstrap"``: n draws of N(0, 1), :func:`stratified_bootstrap_ci` of :func:`iqm`
      with one stratum (a per-arm percentile bootstrap, ``bootstrap_reps`` resamples), over
      ``bootstrap_trials`` data sets (it is slower); truth 0. Not printed by the report as an interval.

    The same arguments give the same table (the draws of each kind and n come from
    ``numpy.random.default_rng([seed, kind index, n])``). Takes about a second at the defaults, nearly all of
    it the bootstrap kind.
    """
    ns = _check_ns(ns)
    trials = _check_count(trials, "trials")
    bootstrap_trials = _check_count(bootstrap_trials, "bootstrap_trials")
    bootstrap_reps = _check_reps(bootstrap_reps)
    confidence = _check_confidence(confidence)
    kinds = _check_kinds(kinds)
    if isinstance(seed, bool) or not isinstance(seed, numbers.Integral) or seed < 0:
        raise ConfigError(f"seed must be an integer >= 0, got {seed!r}")
    out: dict[str, dict[int, float]] = {}
    for kind in kinds:
        out[kind] = {}
        for n in ns:
            rng = np.random.default_rng([int(seed), COVERAGE_KINDS.index(kind), n])
            if kind == "mean":
                _, low, high = mean_band(rng.normal(size=(n, trials)), confidence)
                out[kind][n] = _hits(low, high, 0.0)
            elif kind == "iqm":
                low, high = _trimmed_t_rows(rng.normal(size=(trials, n)), confidence)
                out[kind][n] = _hits(low, high, 0.0)
            elif kind == "difference":
                arm = rng.normal(0.0, _DIFFERENCE_SD[0], size=(trials, n))
                base = rng.normal(0.0, _DIFFERENCE_SD[1], size=(trials, n))
                low, high = _welch_rows(arm, base, confidence)
                out[kind][n] = _hits(low, high, 0.0)
            elif kind == "curve":
                truth = np.arange(_CURVE_STEPS, dtype=float)
                values = truth + np.cumsum(rng.normal(size=(n, trials, _CURVE_STEPS)), axis=-1)
                _, low, high = mean_band(values.reshape(n, trials * _CURVE_STEPS), confidence)
                out[kind][n] = _hits(low, high, np.tile(truth, trials))
            else:
                data = rng.normal(size=(bootstrap_trials, n))
                seeds = rng.integers(0, 2**31, size=bootstrap_trials)
                bounds = np.array([stratified_bootstrap_ci(row, iqm, reps=bootstrap_reps, confidence=confidence,
                                                           seed=int(s)) for row, s in zip(data, seeds)])
                out[kind][n] = _hits(bounds[:, 0], bounds[:, 1], 0.0)
    return out


MEASURED_COVERAGE: dict[str, dict[int, float]] = {
    "mean": {3: 0.951, 5: 0.952, 10: 0.947},
    "iqm": {3: 0.946, 5: 0.938, 10: 0.940},
    "difference": {3: 0.959, 5: 0.951, 10: 0.951},
    "curve": {3: 0.950, 5: 0.949, 10: 0.951},
    "iqm_percentile_bootstrap": {3: 0.739, 5: 0.893, 10: 0.926},
}
"""``coverage_table()`` at its defaults (seed :data:`COVERAGE_SEED`, :data:`COVERAGE_TRIALS` data sets per
cell, the bootstrap kind :data:`COVERAGE_BOOTSTRAP_TRIALS`), rounded to 3 decimals and kept here so the report
need not simulate; ``tests/marl_core/test_stats.py`` re-measures it."""
