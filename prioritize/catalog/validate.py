"""Per-row validation of a canonical catalog, and what each star can be computed from.

:func:`validate_catalog` never drops a row: it appends ``status`` (a code from
:mod:`prioritize.catalog.status`) and ``note`` (every problem found, in words,
``'; '``-separated, in column order; the first problem's code is the status).
:func:`placement_routes` is the one decision of which placement route a row takes; the
engine (:mod:`prioritize.engine`) and :func:`computable_from` both call it on the
stellar parameters :func:`~prioritize.stars.photometry.derive_stellar_parameters`
gives, so ``prioritize check`` and ``prioritize rank`` agree on which stars are
computable.  :func:`check_report` is the text ``prioritize check`` prints.  All checks
are vectorised over the table.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from prioritize.catalog import status
from prioritize.catalog.columns import (INPUT_COLUMNS, NUMERIC_INPUT_COLUMNS, ColumnSpec,
                                        row_number_ids)
from prioritize.errors import CatalogError, ConfigError
from prioritize.stars.photometry import MAX_PARALLAX_REL_ERR, derive_stellar_parameters

ROUTE_MASS_STAGE = "mass+stage"
ROUTE_SEISMIC_STAGE = "asteroseismic+stage"
ROUTE_SEISMIC = "asteroseismic"
ROUTE_CLUSTER = "cluster isochrone"
ROUTE_TEFF_L = "Teff+L"
ROUTE_TEFF_LOGG = "Teff+logg"
ROUTE_NONE = "nothing"
ROUTES = (ROUTE_MASS_STAGE, ROUTE_SEISMIC_STAGE, ROUTE_SEISMIC, ROUTE_CLUSTER, ROUTE_TEFF_L,
          ROUTE_TEFF_LOGG, ROUTE_NONE)
"""Placement routes in the engine's order of preference."""

CLUSTER_CONTEXT_KEYS = ("age_gyr", "feh", "distance_pc", "ebv")
CLUSTER_COLUMNS = {"cluster_age_gyr": "age_gyr", "cluster_feh": "feh",
                   "cluster_distance_pc": "distance_pc", "cluster_ebv": "ebv"}
MEMBER_INHERITS = (("distance_pc", "cluster_distance_pc"), ("ebv", "cluster_ebv"), ("feh", "cluster_feh"))
MAX_LISTED_ROWS = 1000          # check_report lists at most this many rows per section
NOT_COMPUTED = "not computed"   # check_report: rows whose status is not ok
NEEDS_TEXT = "needs mass+stage, or a colour/Teff with parallax/logL/logg"

SPEED_OF_LIGHT_KMS = 299_792.458      # exact (SI definition of the metre)
UNIVERSE_AGE_GYR = 13.8                # Planck Collaboration 2020, A&A 641, A6: 13.787 +- 0.020 Gyr


@dataclass(frozen=True)
class ValueRule:
    """One value-range rule: values of ``column`` outside [``lo``, ``hi``] get ``status``
    (None = a note only) and ``message`` (formatted with ``column`` and ``value``)."""

    column: str
    lo: float
    hi: float
    status: str | None
    message: str

    def broken(self, values: np.ndarray) -> np.ndarray:
        with np.errstate(invalid="ignore"):
            return np.isfinite(values) & ((values < self.lo) | (values > self.hi))


# The rules beyond each column's allowed range (``columns.INPUT_COLUMNS``, applied by
# ``validate_catalog`` with status invalid_value).  INPUT_RULES are applied to the
# catalog before any physics (``check`` and ``rank`` alike); RESULT_RULES to what the
# chain derives, where a value no star can have means the inputs are wrong.
INPUT_RULES = (
    ValueRule("vsini_kms", 0.0, 0.1 * SPEED_OF_LIGHT_KMS, status.INVALID_VALUE,
              "{column} = {value:.4g} km/s is above 0.1 c, impossible for a star (check the unit: km/s)"),
    *(ValueRule(f"{name}_err", math.ulp(0.0), math.inf, None,
                "{column} = 0: a zero uncertainty is not a measurement error (give the measured "
                "error, or leave it empty for the default)")
      for name in ("teff_k", "logg", "feh", "logl_lsun", "mass_msun", "parallax_mas", "prot_d",
                   "vsini_kms", "a_li", "g_mag", "bp_rp", "v_mag", "b_v", "ebv")),
)
RESULT_RULES = (
    ValueRule("veq_from_period_kms", 0.0, 0.1 * SPEED_OF_LIGHT_KMS, status.INVALID_VALUE,
              "prot_d with the star's radius gives v_eq = {value:.3g} km/s, above 0.1 c: no star "
              "rotates that fast (check the period's unit: days)"),
    ValueRule("age_gyr", 0.0, UNIVERSE_AGE_GYR, status.OUT_OF_MODEL_RANGE,
              "placed at an age of {value:.3g} Gyr, older than the Universe (13.8 Gyr)"),
)


def apply_rules(rules, values: dict, codes: np.ndarray, notes: np.ndarray) -> np.ndarray:
    """Apply ``rules`` to ``values`` (column -> array; absent columns are skipped):
    broken rows get the rule's status where they are still ok, and its message added to
    the note.  ``codes`` and ``notes`` (object arrays) are changed in place; returns
    the mask of rows whose status changed."""
    changed = np.zeros(len(codes), bool)
    for rule in rules:
        if rule.column not in values:
            continue
        data = np.asarray(values[rule.column], dtype=float)
        bad = rule.broken(data)
        if not bad.any():
            continue
        rows = np.flatnonzero(bad)
        if rule.status is not None:
            fresh = rows[codes[rows] == status.OK]
            codes[fresh] = rule.status
            changed[fresh] = True
        texts = np.array([rule.message.format(column=rule.column, value=v) for v in data[rows]],
                         dtype=object)
        current = notes[rows]
        notes[rows] = np.where(current == "", texts, current + "; " + texts)
    return changed


# Text that means "no value" in a numeric column (compared lower-case, stripped).
_MISSING_TEXT = frozenset({"", "nan", "na", "n/a", "null", "none", "--", "-", "?", "..."})
_TRUE_TEXT = frozenset({"true", "t", "yes", "y", "1", "1.0", "<", "upper", "limit", "ul", "upper limit"})
_FALSE_TEXT = frozenset({"false", "f", "no", "n", "0", "0.0", "=", "detection", "det"})


def validate_catalog(catalog: pd.DataFrame, path: str | None = None,
                     cluster_context: dict | None = None) -> pd.DataFrame:
    """Check every row of a canonical catalog; return a copy with ``status`` and ``note``.

    Rules, per canonical column present:

    - text in a numeric column -> NaN, status ``invalid_value``, note naming column and text
      (blank, ``nan``, ``N/A``, ``--`` and similar mean missing, not invalid);
    - a value outside the column's allowed range
      (:attr:`~prioritize.catalog.columns.ColumnSpec.range_text`) -> ``invalid_value``
      with column, value and range; values that look like a known slip (log Teff given
      as Teff, a percentage as a probability, RA in -180..180) say so instead;
    - a negative parallax is legal data when ``parallax_mas_err`` > 0 is given (note
      only), otherwise ``invalid_value``;
    - ``stage`` text is normalised to :data:`prioritize.catalog.status.STAGES` (through
      ``STAGE_ALIASES``); unknown text -> ``invalid_value`` naming the allowed names;
    - ``a_li_is_limit`` becomes a boolean (true/false, yes/no, 1/0, ``<`` for a limit;
      missing -> False); other text -> ``invalid_value``;
    - a missing ``star_id`` becomes ``row<N>`` (1-based row); a repeated one ->
      ``duplicate_id`` for the later copies (the first is computed);
    - a row that allows no placement route (:func:`computable_from`: the inputs, and
      the Teff and L the photometry can derive from them) -> ``missing_inputs``, with
      what is missing and why a derivation failed (e.g. a colour outside the range of
      the colour-Teff relation).

    Parameters
    ----------
    catalog : pandas.DataFrame
        Canonical column names (see :func:`prioritize.catalog.io.read_catalog`); other
        columns pass through untouched.  An existing ``status``/``note`` is replaced.
    path : str, optional
        The catalog file, named in errors.
    cluster_context : dict, optional
        Cluster values from the configuration (keys ``age_gyr``, ``feh``, ``distance_pc``,
        ``ebv``; NaN or None = not set) used where the catalog has no cluster columns.

    Returns
    -------
    pandas.DataFrame
        Every input row in order; numeric canonical columns as float64, ``stage``
        normalised, ``a_li_is_limit`` boolean, plus ``status`` and ``note``.

    Raises
    ------
    CatalogError
        The table has no ``star_id`` column.
    ConfigError
        ``cluster_context`` has an unknown key.

    References
    ----------
    Luri X. et al. 2018, A&A 616, A9 (negative parallaxes are valid measurements that
    carry information; they must not be discarded or flagged as errors).
    Bailer-Jones C. A. L. 2015, PASP 127, 994 (inverting parallaxes).
    """
    if "star_id" not in catalog.columns:
        raise CatalogError("has no star_id column; read it with read_catalog, which names "
                           "unnamed stars by their row number", path=path, column="star_id")
    context = _cluster_context(cluster_context)
    out = catalog.drop(columns=[c for c in ("status", "note") if c in catalog.columns])
    notes = _Notes(len(out))

    missing_id = out["star_id"].isna().to_numpy()
    if missing_id.any():
        ids = out["star_id"].to_numpy(dtype=object, copy=True)
        ids[missing_id] = row_number_ids(np.flatnonzero(missing_id))
        out["star_id"] = pd.array(ids, dtype="str")
    _check_duplicates(out["star_id"], notes)

    numbers, not_numeric = {}, {}
    for name in NUMERIC_INPUT_COLUMNS:
        if name in out.columns:
            numbers[name], not_numeric[name] = _to_float(out[name])
            out[name] = numbers[name]
    for name, spec in INPUT_COLUMNS.items():
        if name in numbers:
            notes.add(not_numeric[name], status.INVALID_VALUE,
                      np.array([f"{name}: {str(v)!r} is not a number"
                                for v in catalog[name].to_numpy()[not_numeric[name]]], dtype=object))
            if name == "parallax_mas":
                _check_parallax(numbers, notes)
            else:
                _check_range(spec, numbers[name], notes)
        elif name == "stage" and name in out.columns:
            out[name] = _check_stage(out[name], notes)
        elif name == "a_li_is_limit" and name in out.columns:
            out[name] = _check_limit_flag(out[name], notes)

    apply_rules(INPUT_RULES, numbers, notes.status, notes.note)
    have = _Available(out, context)
    routes = placement_routes(have.table, have.params)
    nothing = routes == ROUTE_NONE
    notes.add(nothing, status.MISSING_INPUTS, _missing_text(have, nothing))
    unused_mass = have.mass & ~have.stage & ~nothing
    notes.add(unused_mass, None, np.array(
        [f"mass_msun given without a stage: not used (placed by {r}); give a stage column "
         "(e.g. evstate, RGB/RC) to place by mass" for r in routes[unused_mass]], dtype=object))
    out["status"] = pd.array(notes.status, dtype="str")
    out["note"] = pd.array(notes.note, dtype="str")
    return out


def with_cluster_values(catalog: pd.DataFrame, cluster_context: dict | None = None) -> pd.DataFrame:
    """The catalog with its cluster columns filled from the configured cluster.

    ``cluster_age_gyr``, ``cluster_feh``, ``cluster_distance_pc`` and ``cluster_ebv``
    take the configured value where the catalog has none; members (a finite cluster
    age) then inherit the cluster's distance (only without a parallax of their own),
    reddening and [Fe/H] where they give none.

    Parameters
    ----------
    catalog : pandas.DataFrame
        Canonical columns.
    cluster_context : dict, optional
        Keys of :data:`CLUSTER_CONTEXT_KEYS` (NaN or None = not set).

    Returns
    -------
    pandas.DataFrame
        A copy with the four cluster columns and ``distance_pc``, ``ebv``, ``feh``.
    """
    context = _cluster_context(cluster_context)
    df = catalog.copy()
    for column, key in CLUSTER_COLUMNS.items():
        value = context[key]
        df[column] = (pd.to_numeric(df[column], errors="coerce").fillna(value)
                      if column in df.columns else value)
    member = np.isfinite(df["cluster_age_gyr"].to_numpy(float))
    for own, column in MEMBER_INHERITS:
        if own not in df.columns:
            df[own] = np.nan
        fill = member & df[own].isna().to_numpy()
        if own == "distance_pc" and "parallax_mas" in df.columns:
            fill &= df["parallax_mas"].isna().to_numpy()
        df.loc[fill, own] = df.loc[fill, column]
    return df


def placement_routes(table: pd.DataFrame, params: pd.DataFrame) -> np.ndarray:
    """The placement route of each row: the one rule the engine and ``check`` share.

    In order of preference:

    1. ``mass+stage``: ``mass_msun`` and a known ``stage``;
    2. ``asteroseismic+stage``: ``numax_uhz``, ``dnu_uhz``, Teff and a known stage (mass,
       radius, log g and L from the scaling relations, :mod:`prioritize.stars.seismology`;
       placed like mass+stage);
    3. ``asteroseismic``: ``numax_uhz``, ``dnu_uhz`` and Teff without a stage (placed from
       Teff with the seismic L and log g);
    4. ``cluster isochrone``: a cluster age, and the star's Teff and L;
    5. ``Teff+L``: Teff and L;
    6. ``Teff+logg``: Teff and the catalog's ``logg``;
    7. ``nothing``.

    Teff and L are those of ``params`` — given in the catalog or derived from its
    colours, magnitudes and distance — so a colour outside the range of its
    colour-Teff relation, or a parallax too imprecise for a distance, means no
    Teff or no L here exactly as in the chain.  Whether the track grid can then
    explain the star is only known after placement (``out_of_model_range``).

    Parameters
    ----------
    table : pandas.DataFrame
        Canonical columns with the cluster values filled (:func:`with_cluster_values`).
    params : pandas.DataFrame
        :func:`~prioritize.stars.photometry.derive_stellar_parameters` of ``table``.

    Returns
    -------
    ndarray of str
        One of :data:`ROUTES` per row.
    """
    n = len(table)
    mass = _numbers(table, "mass_msun")
    stage = table["stage"].to_numpy(dtype=object) if "stage" in table.columns else np.full(n, None)
    known_stage = np.array([isinstance(v, str) and v in status.STAGES for v in stage], dtype=bool)
    teff = np.isfinite(params["teff_k"].to_numpy(float))
    logl = np.isfinite(params["logl_lsun"].to_numpy(float))
    logg = np.isfinite(_numbers(table, "logg"))
    age = np.isfinite(_numbers(table, "cluster_age_gyr"))
    seismic = (_numbers(table, "numax_uhz") > 0) & (_numbers(table, "dnu_uhz") > 0) & teff
    choice = np.select([np.isfinite(mass) & known_stage, seismic & known_stage, seismic,
                        age & teff & logl, teff & logl, teff & logg],
                       [0, 1, 2, 3, 4, 5], default=6)
    return np.array(ROUTES, dtype=object)[choice]


def computable_from(catalog: pd.DataFrame, cluster_context: dict | None = None) -> pd.Series:
    """The placement route each row allows, as the engine decides it (:func:`placement_routes`).

    The catalog is completed with the cluster context (:func:`with_cluster_values`),
    its Teff and L are derived as in the chain
    (:func:`~prioritize.stars.photometry.derive_stellar_parameters`: a parallax counts
    as a distance when it is positive and, if its error is given, error/parallax <=
    :data:`prioritize.stars.photometry.MAX_PARALLAX_REL_ERR`), and the route rule is
    applied.  Values are not range-checked here (see :func:`validate_catalog`); a row
    can allow a route and still be invalid.  A computable row can still fail on the
    tracks: the chain marks a star the grid cannot explain ``out_of_model_range``.

    Parameters
    ----------
    catalog : pandas.DataFrame
        Canonical column names; absent columns count as missing.
    cluster_context : dict, optional
        Keys ``age_gyr``, ``feh``, ``distance_pc``, ``ebv`` (NaN or None = not set).

    Returns
    -------
    pandas.Series
        One of :data:`ROUTES` per row, same index as ``catalog``.

    References
    ----------
    Bailer-Jones C. A. L. 2015, PASP 127, 994 (1/parallax is a biased distance when the
    fractional parallax error exceeds about 20 per cent).
    """
    have = _Available(catalog, _cluster_context(cluster_context))
    return pd.Series(placement_routes(have.table, have.params), index=catalog.index,
                     name="computable_from", dtype="str")


def check_report(validated: pd.DataFrame, cluster_context: dict | None = None) -> str:
    """The text ``prioritize check`` prints for a validated catalog.

    Counts per status, every row with a problem (1-based row number, star_id, status,
    note; above :data:`MAX_LISTED_ROWS` rows the rest are counted), rows that will be
    computed but carry a note, and the rows that will be computed (status ``ok``) per
    placement route — the same rows ``prioritize rank`` computes, since both take the
    route from :func:`placement_routes`.  Only the placement itself can find that the
    track grid does not explain a star; ``rank`` reports those as
    ``out_of_model_range``, and the report says so rather than guessing.

    Parameters
    ----------
    validated : pandas.DataFrame
        The output of :func:`validate_catalog`; a ``computable_from`` column, if present,
        is used for the route counts instead of recomputing them.
    cluster_context : dict, optional
        As given to :func:`validate_catalog`.
    """
    codes = validated["status"].astype(object).to_numpy()
    notes = validated["note"].astype(object).fillna("").to_numpy()
    ids = validated["star_id"].astype(object).to_numpy()
    counts = pd.Series(codes).value_counts()
    order = [c for c in status.ALL if c in counts.index] + sorted(set(counts.index) - set(status.ALL))
    lines = [f"{len(validated)} rows checked", "", "Rows per status:"]
    width = max(len(c) for c in order) if order else 0
    for code in order:
        lines.append(f"  {code.ljust(width)}  {counts[code]:>9d}  {status.DESCRIPTIONS.get(code, '')}")

    problem = np.flatnonzero(codes != status.OK)
    remarked = np.flatnonzero((codes == status.OK) & (notes != ""))
    for title, rows in (("Rows with problems", problem), ("Notes on rows that will be computed", remarked)):
        if rows.size == 0:
            continue
        lines += ["", f"{title} ({rows.size}):"]
        lines += [f"  row {i + 1}  {ids[i]}  [{codes[i]}] {notes[i]}" for i in rows[:MAX_LISTED_ROWS]]
        if rows.size > MAX_LISTED_ROWS:
            lines.append(f"  ... and {rows.size - MAX_LISTED_ROWS} more (the first "
                         f"{MAX_LISTED_ROWS} are listed)")

    routes = (validated["computable_from"] if "computable_from" in validated.columns
              else computable_from(validated, cluster_context))[codes == status.OK].value_counts()
    width = max(map(len, ROUTES + (NOT_COMPUTED,)))
    lines += ["", f"Rows computed ({int((codes == status.OK).sum())}), by placement route:"]
    lines += [f"  {route.ljust(width)}  {int(routes.get(route, 0)):>9d}" for route in ROUTES[:-1]]
    lines += [f"  {NOT_COMPUTED.ljust(width)}  {int((codes != status.OK).sum()):>9d}",
              "  (placement may still fail for a computed star the track grid cannot explain:",
              "  rank then gives it status out_of_model_range)"]
    return "\n".join(lines)


class _Notes:
    """Per-row status and note being built: the first code sticks, notes accumulate."""

    def __init__(self, n: int):
        self.status = np.full(n, status.OK, dtype=object)
        self.note = np.full(n, "", dtype=object)

    def add(self, mask: np.ndarray, code: str | None, texts) -> None:
        """Add ``texts`` (one per True in ``mask``, or one for all) to the masked rows;
        set ``code`` where no problem was recorded yet (``None`` = note only)."""
        rows = np.flatnonzero(mask)
        if rows.size == 0:
            return
        if code is not None:
            fresh = rows[self.status[rows] == status.OK]
            self.status[fresh] = code
        texts = np.asarray(texts, dtype=object) if not isinstance(texts, str) else texts
        current = self.note[rows]
        self.note[rows] = np.where(current == "", texts, current + "; " + texts)


def _cluster_context(context: dict | None) -> dict:
    context = dict(context or {})
    unknown = set(context) - set(CLUSTER_CONTEXT_KEYS)
    if unknown:
        raise ConfigError(f"unknown cluster context key(s) {', '.join(sorted(unknown))}; "
                          f"allowed: {', '.join(CLUSTER_CONTEXT_KEYS)}")
    return {key: (math.nan if context.get(key) is None else float(context[key]))
            for key in CLUSTER_CONTEXT_KEYS}


def _to_float(column: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Values as float64, and the mask of entries that were text but not a number."""
    if pd.api.types.is_numeric_dtype(column.dtype) and not pd.api.types.is_bool_dtype(column.dtype):
        return column.to_numpy(dtype=np.float64, na_value=np.nan), np.zeros(len(column), bool)
    values = pd.to_numeric(column, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
    failed = np.isnan(values) & column.notna().to_numpy()
    if failed.any():
        text = column[failed].astype(str).str.strip().str.lower()
        failed[np.flatnonzero(failed)] = ~text.isin(_MISSING_TEXT).to_numpy()
    return values, failed


def _check_range(spec: ColumnSpec, values: np.ndarray, notes: _Notes) -> None:
    bad = spec.outside(values)
    if not bad.any():
        return
    hinted = np.zeros_like(bad)
    if spec.hint is not None:
        lo, hi, text = spec.hint
        hinted = bad & (values >= lo) & (values <= hi)
        notes.add(hinted, status.INVALID_VALUE,
                  np.array([f"{spec.name} = {v:g} {text}" for v in values[hinted]], dtype=object))
    plain = bad & ~hinted
    allowed = spec.range_text()
    notes.add(plain, status.INVALID_VALUE,
              np.array([f"{spec.name} = {v:g} is outside the allowed range {allowed}"
                        for v in values[plain]], dtype=object))


def _check_parallax(numbers: dict, notes: _Notes) -> None:
    """Negative parallaxes are noisy measurements when an error is given; too large is impossible."""
    parallax = numbers["parallax_mas"]
    error = numbers.get("parallax_mas_err", np.full(parallax.shape, np.nan))
    negative = parallax < 0
    with np.errstate(invalid="ignore"):
        has_error = np.isfinite(error) & (error > 0)
    notes.add(negative & has_error, None,
              np.array([f"parallax_mas = {p:g} is negative (legal for a noisy measurement with "
                        f"parallax_mas_err = {e:g})" for p, e in
                        zip(parallax[negative & has_error], error[negative & has_error])], dtype=object))
    no_error = negative & ~has_error
    notes.add(no_error, status.INVALID_VALUE,
              np.array([f"parallax_mas = {p:g} is negative and has no parallax_mas_err (give its "
                        "error or leave it empty)" for p in parallax[no_error]], dtype=object))
    spec = INPUT_COLUMNS["parallax_mas"]
    allowed = spec.range_text()
    with np.errstate(invalid="ignore"):
        too_large = (parallax > spec.hi) | np.isinf(parallax)
    notes.add(too_large, status.INVALID_VALUE,
              np.array([f"parallax_mas = {p:g} is outside the allowed range {allowed}"
                        for p in parallax[too_large]], dtype=object))


def _check_duplicates(ids: pd.Series, notes: _Notes) -> None:
    repeated = ids.duplicated(keep="first").to_numpy()
    if not repeated.any():
        return
    positions = pd.Series(np.arange(len(ids)))
    first = positions.groupby(ids.to_numpy(), sort=False).transform("min").to_numpy()
    notes.add(repeated, status.DUPLICATE_ID,
              np.array([f"star_id {i!r} repeats row {f + 1} (only the first copy is computed)"
                        for i, f in zip(ids.to_numpy()[repeated], first[repeated])], dtype=object))


def normalise_stage(text) -> str | None:
    """The canonical stage name for a stage text (``"RGB"`` -> ``"lower_giant_branch"``),
    or None when it is not recognised; case, blanks, '-' and '_' are ignored."""
    key = str(text).strip().lower()
    for candidate in (key, key.replace("-", "_").replace(" ", "_"), key.replace("_", " ")):
        if candidate in status.STAGES:
            return candidate
        if candidate in status.STAGE_ALIASES:
            return status.STAGE_ALIASES[candidate]
    return None


def _check_stage(column: pd.Series, notes: _Notes) -> pd.Series:
    # blank text is a missing stage, as an empty CSV cell would be
    column = column.where(~column.astype(str).str.strip().eq(""), np.nan)
    codes, uniques = pd.factorize(column, use_na_sentinel=True)
    canonical = np.array([normalise_stage(u) for u in uniques] + [None], dtype=object)
    mapped = canonical[codes]                      # code -1 (missing) -> the trailing None
    unknown = (codes >= 0) & pd.isna(mapped)
    notes.add(unknown, status.INVALID_VALUE,
              np.array([f"stage {str(v)!r} is not a known stage (use one of "
                        f"{', '.join(status.STAGES)} or a short form such as ms, sgb, rgb, rc)"
                        for v in column.to_numpy()[unknown]], dtype=object))
    result = np.where(unknown, column.astype(object).to_numpy(), mapped)
    return pd.Series(pd.array(np.where(pd.isna(result), np.nan, result), dtype="str"),
                     index=column.index)


def _limit_flag(value) -> bool | None:
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    key = str(value).strip().lower()
    if key in _TRUE_TEXT:
        return True
    if key in _FALSE_TEXT or key in _MISSING_TEXT:
        return False
    return None


def _check_limit_flag(column: pd.Series, notes: _Notes) -> pd.Series:
    if pd.api.types.is_bool_dtype(column.dtype):
        return column.astype(bool)
    codes, uniques = pd.factorize(column, use_na_sentinel=True)
    parsed = np.array([_limit_flag(u) for u in uniques] + [False], dtype=object)
    flags = parsed[codes]                          # code -1 (missing) -> the trailing False
    unknown = np.array([p is None for p in parsed])[codes]
    notes.add(unknown, status.INVALID_VALUE,
              np.array([f"a_li_is_limit: {str(v)!r} is not understood (use true/false, yes/no, "
                        "1/0, or '<' for an upper limit)" for v in column.to_numpy()[unknown]],
                       dtype=object))
    return pd.Series(np.where(unknown, False, flags).astype(bool), index=column.index)


def _numbers(table: pd.DataFrame, name: str) -> np.ndarray:
    if name not in table.columns:
        return np.full(len(table), np.nan)
    return pd.to_numeric(table[name], errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)


class _Available:
    """What each row has: the catalog as the chain sees it (``table``: numbers, canonical
    stages, cluster values filled), its derived stellar parameters (``params``) and
    boolean arrays of the inputs, for the routes and for saying what is missing."""

    def __init__(self, catalog: pd.DataFrame, context: dict):
        table = catalog.copy()
        for name in NUMERIC_INPUT_COLUMNS:
            if name in table.columns:
                table[name] = _numbers(table, name)
        if "stage" in table.columns:
            codes, uniques = pd.factorize(table["stage"], use_na_sentinel=True)
            canonical = np.array([normalise_stage(u) for u in uniques] + [None], dtype=object)
            table["stage"] = canonical[codes]
        self.table = with_cluster_values(table, context)
        self.params = derive_stellar_parameters(self.table)
        n = len(table)

        def given(name: str) -> np.ndarray:
            return np.isfinite(_numbers(self.table, name))

        self.mass = given("mass_msun")
        self.stage = (self.table["stage"].notna().to_numpy() if "stage" in self.table.columns
                      else np.zeros(n, bool))
        colour = given("bp_rp") | (given("bp_mag") & given("rp_mag")) | given("b_v")
        self.teff_inputs = given("teff_k") | colour
        self.teff = np.isfinite(self.params["teff_k"].to_numpy(float))
        self.magnitude = given("g_mag") | given("v_mag")
        parallax, parallax_err = _numbers(self.table, "parallax_mas"), _numbers(self.table, "parallax_mas_err")
        with np.errstate(invalid="ignore", divide="ignore"):
            self.imprecise_parallax = (parallax > 0) & (parallax_err / parallax > MAX_PARALLAX_REL_ERR)
            usable_parallax = (parallax > 0) & ~self.imprecise_parallax
            self.distance = usable_parallax | (_numbers(self.table, "distance_pc") > 0)
        self.luminosity_inputs = given("logl_lsun") | (self.magnitude & self.distance)
        self.luminosity = np.isfinite(self.params["logl_lsun"].to_numpy(float))
        self.logg = given("logg")
        self.cluster_age = given("cluster_age_gyr")
        self.why = self.params["deriv_note"].fillna("").to_numpy(dtype=object)


_MISSING_DETAILS = np.array([
    "",
    " (mass_msun given without a (known) stage)",
    " (Teff or a colour given, but no luminosity or logg: add parallax_mas or distance_pc "
    "with g_mag or v_mag, or logl_lsun, or logg)",
    " (luminosity or logg given, but no Teff: add teff_k or a colour (bp_rp, bp_mag and "
    "rp_mag, or b_v))",
    f" (parallax error above {MAX_PARALLAX_REL_ERR:.0%} of the parallax, too imprecise for a "
    "distance, and no Teff or colour)",
    " (a magnitude without parallax or distance, and no Teff or colour)",
    " (cluster age given, but no g_mag or v_mag)",
    " (a colour and what L needs are given, but the photometry derives no Teff or L from them)",
], dtype=object)


def _missing_text(have: _Available, rows: np.ndarray) -> np.ndarray:
    """Why each row in the mask ``rows`` cannot be placed: what it has, what it lacks,
    and why the photometry could not derive Teff or L (its own words)."""
    detail = np.select(
        [have.mass & ~have.stage,
         have.teff_inputs & ~have.luminosity_inputs & ~have.logg,
         ~have.teff_inputs & (have.luminosity_inputs | have.logg),
         have.magnitude & ~have.distance & have.imprecise_parallax,
         have.magnitude & ~have.distance,
         have.cluster_age & ~have.magnitude,
         have.teff_inputs & (have.luminosity_inputs | have.logg)],
        [1, 2, 3, 4, 5, 6, 7], default=0)[rows]
    why = have.why[rows]
    return (f"missing inputs: {NEEDS_TEXT}" + _MISSING_DETAILS[detail]
            + np.where(why == "", "", "; photometry: " + why.astype(str)).astype(object))
