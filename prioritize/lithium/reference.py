"""The lithium baseline from the user's own reference population (binned, common practice).

A reference population is the user's abundance table: ``teff_k``, ``logg``, ``a_li``,
optionally ``feh`` and ``a_li_is_limit`` (an upper limit, "A(Li) < value").  It is
binned in the coordinates the candidates are placed in, Teff × logg (× [Fe/H] when a
step is given); the engine passes each placed star's *model* Teff and logg from the
track point it was placed on.  Per bin the baseline is the median A(Li) and its
scatter a robust standard deviation.

Upper limits are left-censored data.  Dropping them biases the median up (the stars
with the least lithium are removed); counting them as detections biases it up too
(every limit lies above the true value).  Both statistics here come from the
Kaplan–Meier estimate of the distribution for left-censored data (Feigelson & Nelson
1985): with the distinct detected values x_j, d_j detections at x_j and r_j the
number of values (detections and limits) <= x_j,

    F(x) = P(A(Li) <= x) = prod_{x_j > x} (1 - d_j / r_j),

which is the usual product-limit estimator of the flipped variable -A(Li), for which
the limits are right-censored.  A limit equal to a detected value counts as lying
below it (in the flipped variable: a censored time tied with an event stays at risk).
The estimator assumes the limits are set independently of the true abundance (by the
spectrum's S/N, say), and it cannot place the part of the distribution that lies
below the lowest detection: where limits sit below every detection, the lower
quantiles are undefined (see :func:`censored_quantiles`).

Bins and fallback: a star uses its own bin when that holds at least ``min_count``
reference stars (limits included), else the 3×3 block of bins around it, else the
5×5 block (3×3×3 and 5×5×5 with [Fe/H] bins); the smallest block with enough stars
decides.  When no block has enough stars the baseline is NaN with source
``"no reference coverage"``; when the deciding block has enough stars but so many of
its lowest values are limits that the median or scatter is undefined, it is NaN with
source ``"reference mostly upper limits"``.  For both, the caller (the engine) falls
back to the built-in prior of :mod:`prioritize.lithium.baseline` and says so, or sets
a per-row status; this module does not choose.

The baseline is a planning estimate: it is only as good as the reference table, and
the bins mix stars of different mass and age that share Teff and logg.

References
----------
Kaplan E. L. & Meier P. 1958, J. Am. Stat. Assoc. 53, 457 (product-limit estimator).
Feigelson E. D. & Nelson P. I. 1985, ApJ 293, 192 (Kaplan–Meier for astronomical
upper limits: left-censored data, flipped to right-censored).
Hyndman R. J. & Fan Y. 1996, Am. Stat. 50, 361 (sample quantiles; definition 2,
the inverted distribution function averaged at flat steps).
Rousseeuw P. J. & Croux C. 1993, J. Am. Stat. Assoc. 88, 1273 (MAD and the 1.4826
consistency factor for the normal distribution).
"""

from __future__ import annotations

import itertools
import os
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from ..errors import CatalogError, ConfigError, PrioritizeError

# Normal distribution: Phi^-1(0.75) = 0.674489750196 (any table of the normal
# quantile function); 1.4826 = 1 / Phi^-1(0.75) is the MAD consistency factor, and the
# interquartile range of a Gaussian is 2 Phi^-1(0.75) sigma = 1.349 sigma.
GAUSSIAN_QUARTILE_IN_SIGMA = 0.6744897501960817
GAUSSIAN_IQR_IN_SIGMA = 2.0 * GAUSSIAN_QUARTILE_IN_SIGMA

QUARTILES = (0.25, 0.5, 0.75)
# A Kaplan–Meier step within this of a requested probability counts as equal to it
# (the product of (1 - d/r) carries rounding of ~1e-15 per factor).
_STEP_TOLERANCE = 1e-9

SOURCE_BIN = "reference bin"
SOURCE_MERGED = "reference, merged {}"
SOURCE_NONE = "no reference coverage"
SOURCE_LIMITS = "reference mostly upper limits"
MERGE_HALF_WIDTHS = (0, 1, 2)    # own bin, 3x3, 5x5 blocks

REQUIRED_COLUMNS = ("teff_k", "logg", "a_li")


def censored_quantiles(values, is_upper_limit, q=QUARTILES, groups=None):
    """Quantiles of A(Li) with upper limits, from the Kaplan–Meier estimator.

    F(x) = prod_{x_j > x} (1 - d_j / r_j) over the distinct detected values x_j, with
    d_j detections at x_j and r_j the number of values (detections and limits)
    <= x_j (Feigelson & Nelson 1985; a limit tied with a detection counts as below it).
    The q-quantile is the smallest detected value with F >= q; where F equals q on a
    flat step, it is the midpoint between that value and the next detected value
    (Hyndman & Fan 1996 definition 2).  Without limits this is numpy's
    ``quantile(..., method="averaged_inverted_cdf")``, and the median is exactly
    :func:`numpy.median`.

    Below the lowest detected value the estimator is undefined when limits lie there:
    a mass F_0 = F(lowest detection⁻) > 0 is known to lie below it, but not where.  A
    quantile q <= F_0 is returned as NaN; the lowest detected value is then an upper
    bound on it.  A group with no detection gives NaN throughout.

    Parameters
    ----------
    values : array_like
        A(Li) (dex), or any quantity; for a limit, the limit value.  NaN entries are
        left out.
    is_upper_limit : array_like of bool
        True where the value is an upper limit (the true value is below it).
    q : sequence of float
        Probabilities, each strictly between 0 and 1.
    groups : array_like of int, optional
        Non-negative group label per value; quantiles are computed for each label
        0..max(groups) in one vectorised pass (empty labels give NaN).

    Returns
    -------
    ndarray
        Shape ``(len(q),)``, or ``(max(groups) + 1, len(q))`` with ``groups``.

    Raises
    ------
    PrioritizeError
        A probability is outside (0, 1), a flag is not true/false, the arrays differ
        in length, or a group label is negative or not an integer.

    References
    ----------
    Kaplan & Meier 1958, JASA 53, 457; Feigelson & Nelson 1985, ApJ 293, 192, §2;
    Hyndman & Fan 1996, Am. Stat. 50, 361.
    """
    x = np.asarray(values, dtype=float).ravel()
    flags = np.asarray(is_upper_limit).ravel()
    if flags.dtype != bool and not np.isin(flags, (0, 1)).all():
        raise PrioritizeError("censored_quantiles: is_upper_limit must be true/false (or 1/0) per value")
    limit = flags.astype(bool)
    probs = np.atleast_1d(np.asarray(q, dtype=float))
    if not np.all((probs > 0.0) & (probs < 1.0)):
        raise PrioritizeError(f"censored_quantiles: probabilities must lie strictly between 0 and 1; got {q}")
    if limit.shape != x.shape:
        raise PrioritizeError(f"censored_quantiles: {x.size} values but {limit.size} upper-limit flags; "
                          "give one flag per value")
    label = _group_labels(groups, x.size)
    n_groups = int(label.max()) + 1 if label.size else 1
    keep = np.isfinite(x)
    x, limit, label = x[keep], limit[keep], label[keep]
    result = np.full((n_groups, probs.size), np.nan)

    order = np.lexsort((x, label))
    x, limit, label = x[order], limit[order], label[order]
    group_start = np.searchsorted(label, label, side="left")
    new_run = np.ones(x.size, dtype=bool)
    new_run[1:] = (x[1:] != x[:-1]) | (label[1:] != label[:-1])
    run_start = np.flatnonzero(new_run)
    run_end = np.append(run_start[1:], x.size) - 1
    detections = np.add.reduceat((~limit).astype(float), run_start) if x.size else np.zeros(0)
    runs = detections > 0                       # only detected values are steps of F
    start, end, d = run_start[runs], run_end[runs], detections[runs]
    at_risk = end - group_start[start] + 1.0
    run_x, run_label = x[start], label[start]
    if run_x.size == 0:
        return result[0] if groups is None else result

    factor = 1.0 - d / at_risk
    first = np.ones(run_x.size, dtype=bool)
    first[1:] = run_label[1:] != run_label[:-1]
    last = np.append(run_label[1:] != run_label[:-1], True)
    # F at a step is the product of the factors of the steps above it, a suffix sum of
    # logarithms within the group.  Only the lowest step's factor can be zero; it never
    # enters such a product (it only sets F_0), so it is kept out of the logarithms.
    log_factor = np.log(np.where(first, 1.0, factor))
    suffix = pd.Series(log_factor[::-1]).groupby(run_label[::-1]).cumsum().to_numpy()[::-1]
    cdf = np.exp(suffix - log_factor)
    first_index = np.flatnonzero(first)
    below_lowest = np.zeros(n_groups)
    below_lowest[run_label[first_index]] = cdf[first_index] * factor[first_index]
    has_detection = np.zeros(n_groups, dtype=bool)
    has_detection[run_label[first_index]] = True
    group_first = np.zeros(n_groups, dtype=int)
    group_first[run_label[first_index]] = first_index

    for column, p in enumerate(probs):
        steps_below = np.bincount(run_label, weights=(cdf < p - _STEP_TOLERANCE).astype(float),
                                  minlength=n_groups).astype(int)
        index = np.minimum(group_first + steps_below, run_x.size - 1)
        value = run_x[index]
        flat = (np.abs(cdf[index] - p) <= _STEP_TOLERANCE) & ~last[index]
        value = np.where(flat, 0.5 * (value + run_x[np.minimum(index + 1, run_x.size - 1)]), value)
        defined = has_detection & (below_lowest < p - _STEP_TOLERANCE)
        result[:, column] = np.where(defined, value, np.nan)
    return result[0] if groups is None else result


def _group_labels(groups, size: int) -> np.ndarray:
    """Group labels as int64 (all zero without groups), checked."""
    if groups is None:
        return np.zeros(size, dtype=np.int64)
    raw = np.asarray(groups).ravel()
    if raw.shape != (size,):
        raise PrioritizeError(f"censored_quantiles: {size} values but {raw.size} group labels")
    if raw.size and (not np.issubdtype(raw.dtype, np.integer) or raw.min() < 0):
        raise PrioritizeError("censored_quantiles: group labels must be non-negative integers")
    return raw.astype(np.int64)


def scatter_from_quartiles(q25, q50, q75):
    """Robust 1-sigma scatter from the quartiles of a (possibly censored) sample.

    sigma = (q75 - q25) / 1.349, the interquartile range of a Gaussian in units of its
    sigma (2 Phi^-1(0.75) = 1.3490).  For an uncensored Gaussian sample it estimates
    the same sigma as 1.4826 × MAD, the robust scatter of common practice, which is not
    defined for censored data (the absolute deviations of limits are unknown).  When
    q25 is undefined (NaN: more than a quarter of the Kaplan–Meier mass lies below the
    lowest detection) the upper half is used, sigma = (q75 - q50) / 0.6745, which
    assumes the distribution is symmetric.

    Parameters
    ----------
    q25, q50, q75 : array_like
        Quartiles (dex), e.g. from :func:`censored_quantiles`.

    Returns
    -------
    ndarray
        Scatter (dex); NaN where the median or q75 is undefined.

    References
    ----------
    Rousseeuw & Croux 1993, JASA 88, 1273 (MAD, IQR and their normal-consistency
    factors).
    """
    q25, q50, q75 = (np.asarray(a, dtype=float) for a in (q25, q50, q75))
    full = (q75 - q25) / GAUSSIAN_IQR_IN_SIGMA
    upper = (q75 - q50) / GAUSSIAN_QUARTILE_IN_SIGMA
    return np.where(np.isfinite(q25), full, upper)


@dataclass(frozen=True, eq=False)
class _Statistics:
    """Per-cell statistics on the dense grid box (flat cell index)."""

    n: np.ndarray
    n_limits: np.ndarray
    median: np.ndarray
    scatter: np.ndarray


@dataclass(frozen=True, eq=False)
class ReferenceBaseline:
    """Median A(Li) and its scatter per bin of a user's reference population.

    Build it with :meth:`from_table` (a table in memory) or :func:`load_reference`
    (a file); look candidates up with :meth:`lookup`.  Bins are half-open,
    [k step, (k + 1) step) in each coordinate.  The values are planning estimates.

    Attributes
    ----------
    teff_step : float
        Bin width in Teff (K).
    logg_step : float
        Bin width in logg (dex, cgs).
    feh_step : float or None
        Bin width in [Fe/H] (dex); None: [Fe/H] is not binned.
    min_count : int
        Fewest reference stars (limits included) a bin or merged block needs.
    n_stars : int
        Reference stars used.
    n_limits : int
        How many of them are upper limits.
    messages : tuple of str
        What was left out or assumed, in words.
    """

    teff_step: float
    logg_step: float
    feh_step: float | None
    min_count: int
    n_stars: int
    n_limits: int
    messages: tuple[str, ...]
    _origin: np.ndarray
    _shape: tuple[int, ...]
    _own: _Statistics          # each bin's own stars
    _decided: _Statistics      # the block each bin uses (for no coverage: n of the largest block)
    _level: np.ndarray         # index into MERGE_HALF_WIDTHS of that block; -1: no coverage

    @classmethod
    def from_table(cls, table: pd.DataFrame, teff_step: float = 100.0, logg_step: float = 0.25,
                   feh_step: float | None = None, min_count: int = 20) -> "ReferenceBaseline":
        """Bin a reference population and compute each bin's baseline.

        For every bin: n, the number of upper limits, the Kaplan–Meier median of A(Li)
        (:func:`censored_quantiles`) and the scatter (q75 - q25) / 1.349
        (:func:`scatter_from_quartiles`).  For each bin a candidate may fall in, the
        deciding block is chosen once here: the bin itself if it holds ``min_count``
        stars, else the 3×3 (3×3×3) block around it, else the 5×5 (5×5×5) block.

        Parameters
        ----------
        table : pandas.DataFrame
            Canonical columns ``teff_k`` (K), ``logg`` (dex), ``a_li`` (dex); optional
            ``a_li_is_limit`` (bool; missing column or value: a detection) and ``feh``
            (dex; needed with ``feh_step``).  Rows lacking a needed value are left out
            and counted in :attr:`messages`.
        teff_step, logg_step : float
            Bin widths (K; dex), > 0.
        feh_step : float, optional
            Bin width in [Fe/H] (dex), > 0; None bins in Teff × logg only.
        min_count : int
            Fewest stars a bin or merged block needs, >= 1.

        Returns
        -------
        ReferenceBaseline

        Raises
        ------
        ConfigError
            A step is not a positive number, or ``min_count`` is not a positive integer.
        CatalogError
            A needed column is missing, ``a_li_is_limit`` is not true/false, or no row
            has all the needed values.

        References
        ----------
        Feigelson & Nelson 1985, ApJ 293, 192 (censored estimator); the binning and the
        robust scatter are common practice.
        """
        steps = {"teff_step": teff_step, "logg_step": logg_step}
        if feh_step is not None:
            steps["feh_step"] = feh_step
        for key, step in steps.items():
            if not isinstance(step, (int, float, np.number)) or not np.isfinite(step) or step <= 0:
                raise ConfigError(f"reference baseline: {key} = {step!r} must be a positive number "
                                  "(bin width; e.g. teff_step = 100.0 K, logg_step = 0.25 dex)")
        if isinstance(min_count, (bool, np.bool_)) or not isinstance(min_count, (int, np.integer)) \
                or min_count < 1:
            raise ConfigError(f"reference baseline: min_count = {min_count!r} must be an integer >= 1")
        columns = ("teff_k", "logg", "feh") if feh_step is not None else ("teff_k", "logg")
        _require_columns(table, REQUIRED_COLUMNS + columns[2:], None)

        messages = []
        coords = [pd.to_numeric(table[c], errors="coerce").to_numpy(dtype=float) for c in columns]
        a_li = pd.to_numeric(table["a_li"], errors="coerce").to_numpy(dtype=float)
        limit = _limit_flags(table, messages)
        usable = np.isfinite(a_li) & np.logical_and.reduce([np.isfinite(c) for c in coords])
        if not usable.any():
            raise CatalogError("the reference population has no row with all of "
                               f"{', '.join(columns + ('a_li',))} given")
        if not usable.all():
            messages.append(f"{int((~usable).sum())} reference rows lack one of "
                            f"{', '.join(columns + ('a_li',))} and are left out")
        cells = np.stack([_cell_index(c[usable], s) for c, s in zip(coords, steps.values())])
        a_li, limit = a_li[usable], limit[usable]
        reach = MERGE_HALF_WIDTHS[-1]
        origin = cells.min(axis=1) - reach
        shape = tuple(int(s) for s in cells.max(axis=1) + reach - origin + 1)
        own_flat = np.ravel_multi_index(tuple(cells - origin[:, None]), shape)
        own = _block_statistics(a_li, limit, own_flat, int(np.prod(shape)))
        level, decided = _decide_blocks(a_li, limit, cells - origin[:, None], shape, own, min_count)
        return cls(teff_step=float(teff_step), logg_step=float(logg_step),
                   feh_step=None if feh_step is None else float(feh_step), min_count=int(min_count),
                   n_stars=int(usable.sum()), n_limits=int(limit.sum()), messages=tuple(messages),
                   _origin=origin, _shape=shape, _own=own, _decided=decided, _level=level)

    def lookup(self, teff_k, logg, feh=None) -> dict[str, np.ndarray]:
        """Baseline A(Li) and scatter for stars at (Teff, logg[, [Fe/H]]).

        The engine passes the placed star's model Teff and logg (and its [Fe/H] when
        the reference is binned in it).  Each star takes the block decided for its bin
        (see :meth:`from_table`).  A star outside every block with ``min_count`` stars,
        or with a non-finite coordinate, gets NaN and ``"no reference coverage"``; one
        whose block is dominated by low upper limits gets NaN and ``"reference mostly
        upper limits"``.  The caller falls back to the built-in prior for those (and
        says so) or sets a per-row status.  Planning estimates, not measurements.

        Parameters
        ----------
        teff_k : array_like
            Effective temperature (K).
        logg : array_like
            Surface gravity log10(g / cm s^-2).
        feh : array_like, optional
            [Fe/H] (dex); required when the reference is binned in [Fe/H].

        Returns
        -------
        dict
            ``a_li_base`` (dex, float), ``a_li_scatter`` (dex, float),
            ``baseline_source`` (str: ``"reference bin"``, ``"reference, merged 3x3"``,
            ``"reference, merged 5x5"`` (``3x3x3``/``5x5x5`` with [Fe/H]),
            ``"reference mostly upper limits"`` or ``"no reference coverage"``) and
            ``baseline_n`` (int: reference stars in the block used; for no coverage,
            those in the largest block tried), each of the broadcast input shape.

        Raises
        ------
        PrioritizeError
            The reference is binned in [Fe/H] and ``feh`` is not given.
        """
        if self.feh_step is not None and feh is None:
            raise PrioritizeError(f"this reference baseline is binned in [Fe/H] (feh_step = {self.feh_step}); "
                              "pass the stars' feh to lookup")
        coords = [teff_k, logg] + ([feh] if self.feh_step is not None else [])
        coords = np.broadcast_arrays(*[np.asarray(c, dtype=float) for c in coords])
        shape = coords[0].shape
        steps = [self.teff_step, self.logg_step, self.feh_step][:len(coords)]
        finite = np.logical_and.reduce([np.isfinite(c) for c in coords]).ravel()
        index = np.stack([_cell_index(np.where(np.isfinite(c), c, 0.0).ravel(), s)
                          for c, s in zip(coords, steps)]) - self._origin[:, None]
        inside = finite & np.all((index >= 0) & (index < np.array(self._shape)[:, None]), axis=0)
        flat = np.ravel_multi_index(tuple(np.where(inside, index, 0)), self._shape)
        decided = self._decided
        level = np.where(inside, self._level[flat], -1)
        n = np.where(inside, decided.n[flat], 0)
        median = np.where(level >= 0, decided.median[flat], np.nan)
        scatter = np.where(level >= 0, decided.scatter[flat], np.nan)
        usable = np.isfinite(median) & np.isfinite(scatter)
        # level -1 (no block with min_count stars) picks the last label
        labels = np.array([SOURCE_BIN] + [SOURCE_MERGED.format(_block_name(h, len(coords)))
                                          for h in MERGE_HALF_WIDTHS[1:]] + [SOURCE_NONE], dtype=object)
        source = np.where((level >= 0) & ~usable, SOURCE_LIMITS, labels[level])
        return {"a_li_base": np.where(usable, median, np.nan).reshape(shape),
                "a_li_scatter": np.where(usable, scatter, np.nan).reshape(shape),
                "baseline_source": source.reshape(shape),
                "baseline_n": n.astype(np.int64).reshape(shape)}

    def bin_table(self) -> pd.DataFrame:
        """The non-empty bins with their own statistics (before any merging).

        Returns
        -------
        pandas.DataFrame
            ``teff_lo_k``, ``teff_hi_k``, ``logg_lo``, ``logg_hi`` (and ``feh_lo``,
            ``feh_hi``), ``n``, ``n_limits``, ``a_li_median`` (dex), ``a_li_scatter``
            (dex); NaN statistics where limits leave them undefined.
        """
        filled = np.flatnonzero(self._own.n > 0)
        index = np.array(np.unravel_index(filled, self._shape)) + self._origin[:, None]
        names = ["teff", "logg", "feh"][:len(self._shape)]
        steps = [self.teff_step, self.logg_step, self.feh_step]
        out = {}
        for name, k, step in zip(names, index, steps):
            unit = "_k" if name == "teff" else ""
            out[f"{name}_lo{unit}"] = k * step
            out[f"{name}_hi{unit}"] = (k + 1) * step
        out.update(n=self._own.n[filled], n_limits=self._own.n_limits[filled],
                   a_li_median=self._own.median[filled], a_li_scatter=self._own.scatter[filled])
        return pd.DataFrame(out)


def load_reference(path: str | os.PathLike, column_map: dict[str, str] | None = None, *,
                   teff_step: float = 100.0, logg_step: float = 0.25, feh_step: float | None = None,
                   min_count: int = 20) -> ReferenceBaseline:
    """Read a reference abundance table (any catalog format) and bin it.

    The file is read with :func:`prioritize.catalog.io.read_catalog` (so common
    spellings such as ``Teff``, ``ALi``, ``l_ALi`` are recognised, and ``column_map``
    renames the others) and checked with
    :func:`prioritize.catalog.validate.validate_catalog`: rows with an invalid value
    (non-numeric text, a value outside the column's range, an unknown limit flag) or a
    repeated ``star_id`` are left out and named in ``messages``.  Without an
    ``a_li_is_limit`` column every A(Li) is a detection (said in ``messages``).

    Parameters
    ----------
    path : str or path-like
        The reference table.
    column_map : dict, optional
        ``{your_column: canonical_name}``.
    teff_step, logg_step, feh_step, min_count
        Binning, as in :meth:`ReferenceBaseline.from_table`.

    Returns
    -------
    ReferenceBaseline
        With the reading messages first in :attr:`ReferenceBaseline.messages`.

    Raises
    ------
    CatalogError
        The file is missing or unreadable, lacks ``teff_k``, ``logg`` or ``a_li``
        (or ``feh`` with ``feh_step``), or has no usable row.
    ConfigError
        A binning parameter or the column map is invalid.
    """
    from ..catalog import status
    from ..catalog.io import read_catalog
    from ..catalog.validate import validate_catalog

    table, messages = read_catalog(path, column_map)
    needed = REQUIRED_COLUMNS + (("feh",) if feh_step is not None else ())
    _require_columns(table, needed, str(path))
    checked = validate_catalog(table, path=str(path))
    bad = checked["status"].isin([status.INVALID_VALUE, status.DUPLICATE_ID]).to_numpy()
    if bad.any():
        rows = np.flatnonzero(bad)
        examples = "; ".join(f"row {r + 1}: {checked['note'].iloc[r]}" for r in rows[:3])
        messages.append(f"{rows.size} reference rows with an invalid value or a repeated star_id "
                        f"are left out (e.g. {examples})")
    try:
        baseline = ReferenceBaseline.from_table(checked[~bad], teff_step=teff_step, logg_step=logg_step,
                                                feh_step=feh_step, min_count=min_count)
    except CatalogError as exc:
        raise CatalogError(f"{exc}; check the reference table", path=str(path)) from exc
    return replace(baseline, messages=tuple(messages) + baseline.messages)


def _require_columns(table: pd.DataFrame, needed, path: str | None) -> None:
    missing = [c for c in needed if c not in table.columns]
    if missing:
        raise CatalogError(
            f"is not a usable lithium reference: no column {', '.join(missing)} (it needs teff_k, "
            "logg and a_li; a_li_is_limit is optional, feh is needed when binning in [Fe/H]); "
            f"its columns are {', '.join(map(str, table.columns))}; name yours with the column map, "
            "e.g. Teff=teff_k", path=path)


def _limit_flags(table: pd.DataFrame, messages: list[str]) -> np.ndarray:
    """``a_li_is_limit`` as bool (missing value: a detection); all False without the column."""
    if "a_li_is_limit" not in table.columns:
        messages.append("no a_li_is_limit column: every A(Li) is taken as a detection; give the "
                        "upper-limit flag (e.g. l_ALi) if the table has limits")
        return np.zeros(len(table), dtype=bool)
    try:
        flags = table["a_li_is_limit"].astype("boolean")
    except (TypeError, ValueError) as exc:
        raise CatalogError("a_li_is_limit must be true/false; read the file with load_reference, "
                           "which also understands '<', yes/no and 1/0", column="a_li_is_limit") from exc
    return flags.fillna(False).to_numpy(dtype=bool)


def _cell_index(values: np.ndarray, step: float) -> np.ndarray:
    """Bin number k of [k step, (k + 1) step); values / step is rounded to 1e-9 first so
    that a value on an edge (0.3 / 0.1 = 2.9999999999999996) lands in the upper bin."""
    scaled = np.clip(np.asarray(values, dtype=float) / step, -1e15, 1e15)
    return np.floor(np.round(scaled, 9)).astype(np.int64)


def _block_name(half_width: int, ndim: int) -> str:
    return "x".join([str(2 * half_width + 1)] * ndim)


def _block_statistics(a_li: np.ndarray, limit: np.ndarray, cell: np.ndarray, size: int) -> _Statistics:
    """n, limits, Kaplan–Meier median and scatter of the values grouped by flat cell."""
    quartiles = np.full((size, len(QUARTILES)), np.nan)
    if cell.size:
        found = censored_quantiles(a_li, limit, QUARTILES, groups=cell)
        quartiles[:len(found)] = found
    return _Statistics(n=np.bincount(cell, minlength=size),
                       n_limits=np.bincount(cell, weights=limit, minlength=size).astype(np.int64),
                       median=quartiles[:, 1],
                       scatter=scatter_from_quartiles(*quartiles.T))


def _decide_blocks(a_li, limit, cells, shape, own: _Statistics, min_count: int):
    """For every cell, the smallest block (own bin, 3^d, 5^d) with ``min_count`` stars,
    and its statistics.  ``cells`` (ndim, N) are box-relative indices at least the
    largest half-width away from the box's edges."""
    size = int(np.prod(shape))
    level = np.full(size, -1, dtype=np.int64)
    decided = _Statistics(n=np.zeros(size, dtype=np.int64), n_limits=np.zeros(size, dtype=np.int64),
                          median=np.full(size, np.nan), scatter=np.full(size, np.nan))
    counts = own.n
    for index, half_width in enumerate(MERGE_HALF_WIDTHS):
        offsets = list(itertools.product(range(-half_width, half_width + 1), repeat=cells.shape[0]))
        targets = [np.ravel_multi_index(tuple(cells + np.array(o)[:, None]), shape) for o in offsets]
        counts = np.bincount(np.concatenate(targets), minlength=size)
        chosen = (level < 0) & (counts >= min_count)
        if half_width == 0:
            stats = own
        else:
            kept = [(np.flatnonzero(chosen[t]), t) for t in targets]
            stars = np.concatenate([k for k, _ in kept])
            stats = _block_statistics(a_li[stars], limit[stars],
                                      np.concatenate([t[k] for k, t in kept]), size)
        level[chosen] = index
        for name in ("n", "n_limits", "median", "scatter"):
            getattr(decided, name)[chosen] = getattr(stats, name)[chosen]
    uncovered = level < 0
    decided.n[uncovered] = counts[uncovered]
    return level, decided
