"""Evaluation statistics for a handful of seeds per arm: interquartile mean, stratified bootstrap intervals,
two-sample tests, Holm's adjustment and the probability of improvement.

Following Agarwal et al. 2021 ("Deep RL at the edge of the statistical precipice", NeurIPS 2021,
arXiv:2108.13264), an arm is summarised by its interquartile mean (IQM) and by percentile bootstrap
intervals that resample runs within each task (stratum) independently, rather than by a mean ± std that
hides how few runs there are.

Conventions shared by every function:

* Scores are array-likes with one number per run (seed). NaN marks a missing or failed run and is dropped
  before anything is computed; ±inf is kept (a diverged run is a result) and propagates.
* A quantity that cannot be computed (no runs left, a test with too few runs) is NaN, never an exception.
  An argument out of range raises :class:`marl_core.errors.ConfigError` that names it.
* Randomness comes only from a ``numpy.random.Generator`` built from the ``seed`` argument, so the same
  inputs and seed give the same interval; global RNG state is never touched.
* Intervals are ``(low, high)`` tuples of floats; p-values are two-sided.

Only numpy and scipy are used (scipy is imported inside the functions that need it); this module does not
import torch or matplotlib.
"""

from __future__ import annotations

import math
import numbers
import warnings
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np

from marl_core.errors import ConfigError

__all__ = ["iqm", "stratified_bootstrap_ci", "summarize", "welch_p", "mannwhitney_p", "holm",
           "probability_of_improvement", "compare", "min_seeds_warning", "TESTS", "ALPHA"]

TESTS = ("mannwhitney", "welch")
"""Names accepted by ``compare(test=...)`` and ``min_seeds_warning(test=...)``."""

ALPHA = 0.05
"""Significance level the seed-count warnings are written against (common practice (no source))."""

_FEW_RUNS = 5  # below this many runs per arm the warnings speak up; common practice (no source)


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


def stratified_bootstrap_ci(scores: Any, statistic: Callable[..., Any], reps: int = 2000,
                            confidence: float = 0.95, seed: int | None = 0) -> tuple[float, float]:
    """Percentile bootstrap interval of ``statistic`` over pooled runs, resampled within strata
    (Agarwal et al. 2021).

    ``scores`` is a 1-D array (or list of numbers) holding one stratum, or a list of 1-D arrays holding one
    stratum (task, game variant) each, with the runs of that stratum as elements; strata may differ in
    size. A 2-D ndarray is rejected because its orientation (tasks × runs or runs × tasks) is ambiguous.
    NaNs are dropped within each stratum first; a stratum left empty is skipped, and with no runs at all
    the interval is ``(nan, nan)``.

    Each of the ``reps`` resamples draws, independently in every stratum, as many runs as the stratum has,
    with replacement; the strata are concatenated and ``statistic`` is applied to the pooled resample.
    The interval is the ``(1 - confidence) / 2`` and ``(1 + confidence) / 2`` percentiles of the ``reps``
    values. When every stratum has one run (in particular, a single run x) every resample is the data and
    the interval collapses to ``(statistic(data), statistic(data))``, i.e. ``(x, x)`` for mean or IQM.

    ``statistic`` must reduce the last axis like a numpy reduction: it is called once as
    ``statistic(samples, axis=-1)`` with ``samples`` of shape ``(reps, N)`` (N = pooled number of runs)
    and must return shape ``(reps,)``; ``np.mean``, ``np.median`` and :func:`iqm` qualify. Memory is
    ``O(reps * N)``. Randomness comes from ``numpy.random.default_rng(seed)`` only.

    The percentile bootstrap under-covers a little at small n (about 92–93% for a nominal 95% interval of
    the mean of 20 normal draws) and gives very wide intervals with fewer than 5 runs.
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
    """Point estimates and bootstrap intervals of one arm's runs (NaNs dropped).

    Returns ``{"n", "mean", "mean_ci", "iqm", "iqm_ci", "std"}``: ``n`` is the number of runs kept, the
    intervals are :func:`stratified_bootstrap_ci` (one stratum, percentile, ``confidence``) of the mean and
    of the IQM, and ``std`` is the sample standard deviation (``ddof=1``; NaN with fewer than 2 runs).
    With no runs every value but ``n = 0`` is NaN.
    """
    runs = _runs(x, "x")
    n = int(runs.size)
    if n == 0:
        nan = float("nan")
        return {"n": 0, "mean": nan, "mean_ci": (nan, nan), "iqm": nan, "iqm_ci": (nan, nan), "std": nan}
    return {
        "n": n,
        "mean": float(np.mean(runs)),
        "mean_ci": stratified_bootstrap_ci(runs, np.mean, reps=reps, confidence=confidence, seed=seed),
        "iqm": iqm(runs),
        "iqm_ci": stratified_bootstrap_ci(runs, iqm, reps=reps, confidence=confidence, seed=seed),
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
    * ``difference_ci``: percentile bootstrap interval of that difference, resampling the runs of each
      side independently (``reps`` resamples, ``numpy.random.default_rng(seed)``);
    * ``p_value``: two-sided, :func:`mannwhitney_p` (``test="mannwhitney"``, the default: no normality
      assumed) or :func:`welch_p` (``test="welch"``);
    * ``test``: the name passed in;
    * ``prob_improvement``: :func:`probability_of_improvement` of arm over baseline;
    * ``n_arm``, ``n_baseline``: runs kept after dropping NaNs;
    * ``warning``: :func:`min_seeds_warning` for those counts (None when the counts are adequate).

    With no runs on a side, the difference, its interval and the probability of improvement are NaN.
    Adjust the p-values of several arms against one baseline together with :func:`holm`.
    """
    test = _check_test(test)
    reps = _check_reps(reps)
    confidence = _check_confidence(confidence)
    rng = _generator(seed)
    a, b = _runs(arm, "arm"), _runs(baseline, "baseline")
    nan = float("nan")
    if a.size and b.size:
        difference = float(np.mean(a) - np.mean(b))
        if a.size == 1 and b.size == 1:
            difference_ci = (difference, difference)
        else:
            ra, rb = _resample([a, b], reps, rng)
            difference_ci = _percentile_interval(ra.mean(axis=-1) - rb.mean(axis=-1), confidence)
    else:
        difference, difference_ci = nan, (nan, nan)
    p_value = mannwhitney_p(a, b) if test == "mannwhitney" else welch_p(a, b)
    return {
        "difference": difference,
        "difference_ci": difference_ci,
        "p_value": p_value,
        "test": test,
        "prob_improvement": probability_of_improvement(a, b),
        "n_arm": int(a.size),
        "n_baseline": int(b.size),
        "warning": min_seeds_warning(int(a.size), int(b.size), test),
    }


def min_seeds_warning(n_arm: int, n_base: int, test: str) -> str | None:
    """A plain-language warning when ``n_arm`` and ``n_base`` runs are too few for ``test``, else None.

    * ``"mannwhitney"``: the most extreme split of n + m runs has probability ``1 / C(n + m, n)`` in each
      tail, so the smallest two-sided exact p-value is ``2 / C(n + m, n)``; when it exceeds :data:`ALPHA`
      (0.05) no difference, however large, can be significant. At n = m = 3 it is 2 / C(6, 3) = 0.1; at
      n = m = 4 it is 2 / 70 ≈ 0.029. (scipy's normal approximation, used with ties, gives similar bounds.)
    * ``"welch"``: warns with fewer than 5 runs on a side, a common threshold (common practice (no
      source)); with fewer than 2 the p-value is undefined.
    * Either test: with fewer than 5 runs on a side, notes that IQM and bootstrap intervals are very wide.

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
            f"With fewer than {_FEW_RUNS} runs on a side, IQM and bootstrap confidence intervals are very "
            "wide (and the percentile bootstrap under-covers at small n); read them as rough.")
    return " ".join(notes) or None
