"""The column contract: canonical input columns, their spellings, and the output columns.

Everything here is data.  Readers use :data:`INPUT_COLUMNS` and :func:`recognise` to
give a user's table the canonical names; the validator uses each column's ``dtype``
and allowed range; the command line and the README print :data:`OUTPUT_COLUMNS`
with :func:`format_column_table`.

Units are in the name wherever the value is a bare float (``teff_k``, ``parallax_mas``).
Every measured quantity may carry a ``<name>_err`` column: a 1-sigma uncertainty in
the same unit.  Magnitudes are apparent, in the Vega system of their band.

The allowed ranges are bounds of the possible (a Teff below 2000 K, a mass of zero),
used to catch slips in the input; they are not the range the stellar models cover,
which the placement stage checks.

To add an output column, add one line to :data:`OUTPUT_COLUMNS`; to add an input
column, add one :class:`ColumnSpec` to ``_INPUT_SPECS`` (its ``_err`` twin is made
by :func:`_with_error`).

References
----------
Gaia Collaboration, Vallenari A. et al. 2023, A&A 674, A1 (Gaia DR3; the ``gaia_source``
column names recognised here).
Ochsenbein F., Bauer P., Marcout J. 2000, A&AS 143, 23 (VizieR; its ``e_`` prefix for
errors and ``l_`` prefix for limit flags).
"""

from __future__ import annotations

import difflib
import math
from dataclasses import dataclass

import numpy as np

from prioritize.errors import ConfigError

FLOAT, TEXT, BOOL, INT = "float64", "str", "bool", "int64"


@dataclass(frozen=True)
class ColumnSpec:
    """One column of the contract.

    Parameters
    ----------
    name : str
        Canonical name.
    dtype : str
        ``"float64"``, ``"str"``, ``"bool"`` or ``"int64"``.
    unit : str
        Unit of a bare float ("" when dimensionless or not a number).
    description : str
        One line for users.
    lo, hi : float
        Allowed range for validation (``-inf``/``inf`` when open-ended).
    lo_inclusive, hi_inclusive : bool
        Whether the bound itself is allowed.
    aliases : tuple of str
        Other spellings recognised case-insensitively (the canonical name always is).
    hint : tuple (lo, hi, text) or None
        Out-of-range values inside ``[lo, hi]`` get ``text`` as their note instead of the
        range, when they look like a known mistake (log Teff, a percentage, ...).
    """

    name: str
    dtype: str
    unit: str
    description: str
    lo: float = -math.inf
    hi: float = math.inf
    lo_inclusive: bool = True
    hi_inclusive: bool = True
    aliases: tuple[str, ...] = ()
    hint: tuple[float, float, str] | None = None

    def range_text(self) -> str:
        """The allowed range in words, e.g. ``"2000 to 50000 K"`` or ``"> 0 Msun"``."""
        unit = f" {self.unit}" if self.unit else ""
        if math.isinf(self.hi):
            return f"{'>=' if self.lo_inclusive else '>'} {self.lo:g}{unit}"
        if math.isinf(self.lo):
            return f"{'<=' if self.hi_inclusive else '<'} {self.hi:g}{unit}"
        lo_word = "" if self.lo_inclusive else " (exclusive)"
        return f"{self.lo:g}{lo_word} to {self.hi:g}{unit}"

    def outside(self, values: np.ndarray) -> np.ndarray:
        """Boolean mask of finite-or-infinite values outside the allowed range (NaN is not)."""
        with np.errstate(invalid="ignore"):
            below = values < self.lo if self.lo_inclusive else values <= self.lo
            above = values > self.hi if self.hi_inclusive else values >= self.hi
        return below | above | np.isinf(values)


def _with_error(spec: ColumnSpec, description: str | None = None) -> tuple[ColumnSpec, ColumnSpec]:
    """A measured column and its 1-sigma ``_err`` twin; the twin's aliases are made
    from the measured column's (``e_Teff``, ``Teff_err``, ``Teff_error``)."""
    bases = (spec.name, *spec.aliases)
    err_aliases = tuple(dict.fromkeys(
        form.format(a) for a in bases for form in ("e_{}", "{}_err", "{}_error", "err_{}", "sigma_{}")
    ))
    err = ColumnSpec(
        name=f"{spec.name}_err", dtype=FLOAT, unit=spec.unit,
        description=description or f"1-sigma uncertainty of {spec.name}",
        lo=0.0, aliases=err_aliases,
    )
    return spec, err


def _magnitude(name: str, band: str, aliases: tuple[str, ...]) -> ColumnSpec:
    return ColumnSpec(name, FLOAT, "mag", f"apparent {band} magnitude", lo=-5.0, hi=30.0,
                      aliases=aliases)


_INPUT_SPECS: tuple[ColumnSpec, ...] = (
    ColumnSpec("star_id", TEXT, "", "star identifier, unique in the catalog "
               "(made from the row number, row1, row2, ..., when absent)",
               aliases=("designation", "source_id", "id", "name", "star", "starid", "star_name", "object",
                        "objid", "apogee_id", "sobject_id", "obsid", "cname", "tic", "tic_id", "kic",
                        "kic_id", "epic")),
    ColumnSpec("ra_deg", FLOAT, "deg", "right ascension (ICRS)", lo=0.0, hi=360.0,
               aliases=("ra", "radeg", "ra_icrs", "raj2000", "_raj2000", "ra_j2000"),
               hint=(-180.0, 0.0, "looks like RA in -180..180 deg (give RA in 0..360 deg)")),
    ColumnSpec("dec_deg", FLOAT, "deg", "declination (ICRS)", lo=-90.0, hi=90.0,
               aliases=("dec", "dedeg", "decdeg", "de_icrs", "dec_icrs", "dej2000", "_dej2000",
                        "dec_j2000", "decl")),
    *_with_error(_magnitude("g_mag", "Gaia G", ("phot_g_mean_mag", "gmag", "g"))),
    _magnitude("bp_mag", "Gaia G_BP", ("phot_bp_mean_mag", "bpmag", "bp")),
    _magnitude("rp_mag", "Gaia G_RP", ("phot_rp_mean_mag", "rpmag", "rp")),
    *_with_error(ColumnSpec("bp_rp", FLOAT, "mag", "Gaia colour G_BP - G_RP (observed, reddened)",
                            lo=-1.0, hi=8.0, aliases=("bp-rp", "bprp", "g_bp-g_rp", "bp_minus_rp"))),
    *_with_error(_magnitude("v_mag", "Johnson V", ("v", "vmag", "v_johnson"))),
    *_with_error(ColumnSpec("b_v", FLOAT, "mag", "Johnson colour B - V (observed, reddened)",
                            lo=-1.0, hi=5.0, aliases=("b-v", "bmv", "b_minus_v"))),
    # Bare "R"/"Rmag" are left out on purpose: many catalogs use them for Sloan r.
    _magnitude("r_mag", "Cousins R_C", ("rc", "r_c", "rcmag", "rc_mag")),
    *_with_error(ColumnSpec("parallax_mas", FLOAT, "mas",
                            "trigonometric parallax; negative values are legal when an error is given",
                            lo=0.0, hi=1000.0,
                            aliases=("parallax", "plx", "varpi", "parallax_gaia"))),
    ColumnSpec("distance_pc", FLOAT, "pc", "distance", lo=0.0, lo_inclusive=False,
               aliases=("distance", "dist", "dist_pc", "d_pc", "r_med_geo", "rgeo", "distance_gspphot")),
    *_with_error(ColumnSpec("ebv", FLOAT, "mag", "colour excess E(B-V) towards the star",
                            lo=0.0, hi=10.0,
                            aliases=("e(b-v)", "ebmv", "reddening"))),
    ColumnSpec("ebp_rp", FLOAT, "mag", "colour excess E(BP-RP) towards the star (used for E(B-V) "
               "when ebv is not given)", lo=0.0, hi=15.0,
               aliases=("ebpminrp_gspphot", "e(bp-rp)", "ebpminrp")),
    ColumnSpec("a_g_ext", FLOAT, "mag", "extinction A_G in the Gaia G band (used for E(B-V) when "
               "neither ebv nor ebp_rp is given)", lo=0.0, hi=20.0,
               aliases=("ag_gspphot", "a_g_val", "ag", "a_g_extinction")),
    *_with_error(ColumnSpec("teff_k", FLOAT, "K", "effective temperature", lo=2000.0, hi=50000.0,
                            aliases=("teff", "t_eff", "teff_gspphot", "teff_val", "teff_spec", "teff_spec_k",
                                     "teff_sp"),
                            hint=(3.3, 4.8, "looks like log Teff; give Teff in K"))),
    *_with_error(ColumnSpec("logg", FLOAT, "dex(cm s-2)", "surface gravity log10(g / cm s^-2)",
                            lo=-1.0, hi=6.0, aliases=("log_g", "logg_gspphot", "logg_spec", "logg_sp"))),
    *_with_error(ColumnSpec("logl_lsun", FLOAT, "dex(Lsun)", "luminosity log10(L / Lsun)",
                            lo=-6.0, hi=8.0, aliases=("logl", "log_l", "loglum", "log_lum"))),
    *_with_error(ColumnSpec("feh", FLOAT, "dex", "metallicity [Fe/H] (or [M/H])", lo=-5.0, hi=1.5,
                            aliases=("[fe/h]", "fe_h", "fe/h", "feh_spec", "mh", "[m/h]", "m_h", "mh_gspphot",
                                     "metallicity"))),
    *_with_error(ColumnSpec("mass_msun", FLOAT, "Msun", "stellar mass", lo=0.0, hi=100.0,
                            lo_inclusive=False, aliases=("mass", "m", "mstar", "m_star", "mass_flame"))),
    *_with_error(ColumnSpec("numax_uhz", FLOAT, "uHz", "frequency of maximum oscillation power nu_max "
                            "(asteroseismic)", lo=0.0, hi=10000.0, lo_inclusive=False,
                            aliases=("numax", "nu_max", "numax_muhz", "nu_max_uhz", "vmax"))),
    *_with_error(ColumnSpec("dnu_uhz", FLOAT, "uHz", "large frequency separation Delta nu (asteroseismic)",
                            lo=0.0, hi=500.0, lo_inclusive=False,
                            aliases=("dnu", "delta_nu", "deltanu", "dnu_muhz", "delnu", "large_separation"))),
    ColumnSpec("stage", TEXT, "", "evolutionary stage (main_sequence, turnoff, subgiant, "
               "lower_giant_branch, upper_giant_branch, red_clump, or a short form such as rgb, rc)",
               aliases=("evol_stage", "evstage", "evolutionary_stage", "phase", "evstate", "evolstate",
                        "evol_state", "evo_state", "es")),
    *_with_error(ColumnSpec("prot_d", FLOAT, "d", "rotation period", lo=0.0, lo_inclusive=False,
                            aliases=("prot", "period", "p_rot", "rotation_period"))),
    *_with_error(ColumnSpec("vsini_kms", FLOAT, "km/s", "projected rotational velocity v sin i",
                            lo=0.0, aliases=("vsini", "v_sini", "vsin_i", "vsini_km_s"))),
    *_with_error(ColumnSpec("a_li", FLOAT, "dex", "measured lithium abundance A(Li) = 12 + log10(N_Li/N_H)",
                            lo=-1.0, hi=5.0, aliases=("ali", "a(li)", "a_li_lte", "a_li_nlte", "li1", "a_li_6708",
                                                  "lithium"))),
    ColumnSpec("a_li_is_limit", BOOL, "", "true when a_li is an upper limit "
               "(accepts true/false, yes/no, 1/0, '<' for a limit, empty for a detection; a survey flag "
               "column such as flag_a_li reads 0 as a detection, 1 as an upper limit and other "
               "codes as an unusable A(Li))",
               aliases=("l_ali", "ali_limit", "l_a(li)", "l_a_li", "a_li_limit", "ali_upper_limit",
                        "li_lim", "lim_li", "a_li_lim", "lim_a_li", "lim_li1", "li_limit",
                        "upper_li", "li_upper_limit", "flag_a_li", "flag_ali", "flag_li",
                        "a_li_flag", "li_flag", "li_upper")),
    ColumnSpec("cluster", TEXT, "", "cluster name (rows of one cluster share an isochrone)",
               aliases=("cluster_name", "cl", "clust")),
    ColumnSpec("cluster_age_gyr", FLOAT, "Gyr", "cluster age", lo=0.0, hi=14.0, lo_inclusive=False,
               aliases=("cluster_age", "age_cluster")),
    ColumnSpec("cluster_feh", FLOAT, "dex", "cluster [Fe/H]", lo=-5.0, hi=1.5,
               aliases=("cluster_[fe/h]", "feh_cluster")),
    ColumnSpec("cluster_distance_pc", FLOAT, "pc", "cluster distance", lo=0.0, lo_inclusive=False,
               aliases=("cluster_distance", "cluster_dist", "dist_cluster")),
    ColumnSpec("cluster_ebv", FLOAT, "mag", "cluster colour excess E(B-V)", lo=0.0, hi=10.0,
               aliases=("cluster_e(b-v)", "ebv_cluster")),
    ColumnSpec("member_prob", FLOAT, "", "cluster membership probability (0 to 1)", lo=0.0, hi=1.0,
               aliases=("pmem", "p_mem", "proba", "memb_prob", "membership_prob", "membership_probability"),
               hint=(1.0, 100.0, "looks like a percentage (give a probability between 0 and 1)")),
)

INPUT_COLUMNS: dict[str, ColumnSpec] = {spec.name: spec for spec in _INPUT_SPECS}
"""Canonical input columns in their canonical order."""

NUMERIC_INPUT_COLUMNS = tuple(n for n, s in INPUT_COLUMNS.items() if s.dtype == FLOAT)
TEXT_INPUT_COLUMNS = tuple(n for n, s in INPUT_COLUMNS.items() if s.dtype == TEXT)
MAGNITUDE_COLUMNS = ("g_mag", "bp_mag", "rp_mag", "v_mag", "r_mag")


def _build_alias_index() -> dict[str, str]:
    index: dict[str, str] = {}
    for spec in _INPUT_SPECS:
        for spelling in (spec.name, *spec.aliases):
            key = spelling.strip().lower()
            if index.get(key, spec.name) != spec.name:
                raise RuntimeError(f"spelling {spelling!r} claimed by {index[key]} and {spec.name}")
            index[key] = spec.name
    return index


ALIASES: dict[str, str] = _build_alias_index()
"""Lower-case spelling -> canonical input name (canonical names included)."""

_SECONDARY_BASES = (
    # identifiers of one survey, used when the catalog has no other identifier
    "source_id", "apogee_id", "sobject_id", "obsid", "cname", "tic", "tic_id", "kic", "kic_id", "epic",
    # Gaia DR3 astrophysical parameters from BP/RP spectra (Andrae et al. 2023), used when
    # no spectroscopic value is given
    "teff_gspphot", "logg_gspphot", "mh_gspphot",
    # [M/H] stands in for [Fe/H] only when the catalog has no [Fe/H]
    "mh", "[m/h]", "m_h", "metallicity",
)
SECONDARY_SPELLINGS: frozenset[str] = frozenset(
    spelling for base in _SECONDARY_BASES
    for spelling in (base, *(f.format(base) for f in ("e_{}", "{}_err", "{}_error", "err_{}", "sigma_{}")))
    if spelling in ALIASES)
"""Spellings that give way to any other spelling of the same column: a Gaia DR3
export carries both ``designation`` and ``source_id``; an APOGEE table both ``FE_H``
and ``M_H``; a spectroscopic table merged with Gaia both ``TEFF`` and ``teff_gspphot``.
The other spelling is read and this one passes through, with a message."""

CONDITIONAL_SPELLINGS: dict[str, tuple[str, str, str]] = {
    "distance_gspphot": ("distance_pc", "parallax_mas",
                         "the parallax gives the distance (distance_gspphot is a model distance "
                         "from the BP/RP spectrum, Andrae et al. 2023)"),
}
"""Spelling -> (canonical column, column that makes it unused, why): read only when the
other column is absent."""

IGNORED_SPELLINGS: dict[str, str] = {
    "li_fe": "[Li/Fe] is not read: give A(Li) = [Li/Fe] + [Fe/H] + the survey's solar A(Li) as a_li",
    "[li/fe]": "[Li/Fe] is not read: give A(Li) = [Li/Fe] + [Fe/H] + the survey's solar A(Li) as a_li",
    "ew_li": "equivalent widths are not read: give A(Li) as a_li",
    "ewli": "equivalent widths are not read: give A(Li) as a_li",
    "ew_li6708": "equivalent widths are not read: give A(Li) as a_li",
    "teff_gspspec": "GSP-Spec parameters are not read; map it with --columns teff_gspspec=teff_k to use it",
    "logg_gspspec": "GSP-Spec parameters are not read; map it with --columns logg_gspspec=logg to use it",
    "mh_gspspec": "GSP-Spec parameters are not read; map it with --columns mh_gspspec=feh to use it",
    "radius_gspphot": "radius is derived from L and Teff (or the asteroseismic scaling relations), not read",
    "lum_flame": "map it with --columns to logl_lsun after taking log10 (FLAME gives L in L_sun, not log L)",
    "age_flame": "ages are computed from the tracks, not read",
    "age": "ages are computed from the tracks, not read",
}
"""Lower-case spelling of a column that looks usable but is not read, and why (the
reader says so)."""


def recognise(column: str) -> str | None:
    """The canonical name a column spelling stands for, or None.

    Matching ignores case and surrounding blanks and is otherwise exact
    (``e_B-V`` is the error of B-V, ``E(B-V)`` the reddening).
    """
    return ALIASES.get(str(column).strip().lower())


def suggest(name: str, choices=None) -> str:
    """`` (did you mean 'x'?)`` for the closest canonical name, or ``""``."""
    choices = list(INPUT_COLUMNS) if choices is None else list(choices)
    close = difflib.get_close_matches(str(name).lower(), choices, n=1, cutoff=0.6)
    return f" (did you mean '{close[0]}'?)" if close else ""


def check_column_map(mapping: dict[str, str]) -> dict[str, str]:
    """Check a user's ``{their_name: canonical_name}`` map; return a clean copy.

    Raises
    ------
    ConfigError
        A target is not a canonical input column, a name is empty, or two of the
        user's columns are mapped to one canonical name.
    """
    clean: dict[str, str] = {}
    targets: dict[str, str] = {}
    for source, target in mapping.items():
        source, target = str(source).strip(), str(target).strip()
        if not source or not target:
            raise ConfigError(f"column map entry {source!r} = {target!r} has an empty name; "
                              "write yourname=canonical_name, e.g. Teff=teff_k")
        if target not in INPUT_COLUMNS:
            raise ConfigError(f"column map {source!r} = {target!r}: {target!r} is not a canonical "
                              f"column{suggest(target)}; allowed: {', '.join(INPUT_COLUMNS)}")
        if target in targets and targets[target] != source:
            raise ConfigError(f"columns {targets[target]!r} and {source!r} are both mapped to "
                              f"{target!r}; map only one of them")
        targets[target] = source
        clean[source] = target
    return clean


def row_number_ids(positions: np.ndarray) -> np.ndarray:
    """Identifiers ``row1``, ``row2``, ... for 0-based row positions (the 1-based row number)."""
    return np.char.add("row", (np.asarray(positions) + 1).astype(str)).astype(object)


@dataclass(frozen=True)
class OutputColumn:
    """A column of the ranked output: unit and meaning."""

    name: str
    dtype: str
    unit: str
    description: str


def _out(name: str, dtype: str, unit: str, description: str) -> tuple[str, OutputColumn]:
    return name, OutputColumn(name, dtype, unit, description)


OUTPUT_COLUMNS: dict[str, OutputColumn] = dict((
    _out("star_id", TEXT, "", "star identifier (as given, or row<N> from the row number)"),
    _out("rank", INT, "", "1 = observe first; rows that could not be computed come last"),
    _out("priority", FLOAT, "1/h", "expected detections per hour on target, higher is better (a planning estimate)"),
    _out("status", TEXT, "", "ok, or the reason code why the row was not (fully) computed"),
    _out("note", TEXT, "", "what was derived or what to fix, in words"),
    _out("mass_msun", FLOAT, "Msun", "stellar mass from the placement on tracks"),
    _out("mass_err_msun", FLOAT, "Msun", "1-sigma uncertainty of mass_msun"),
    _out("age_gyr", FLOAT, "Gyr", "stellar age from the placement on tracks"),
    _out("age_err_gyr", FLOAT, "Gyr", "1-sigma uncertainty of age_gyr"),
    _out("stage", TEXT, "", "evolutionary stage (main_sequence ... red_clump)"),
    _out("eep", FLOAT, "", "equivalent evolutionary point along the track (dimensionless)"),
    _out("teff_k", FLOAT, "K", "effective temperature used"),
    _out("logl_lsun", FLOAT, "dex(Lsun)", "log10 luminosity used"),
    _out("radius_rsun", FLOAT, "Rsun", "stellar radius"),
    _out("feh", FLOAT, "dex", "[Fe/H] used"),
    _out("m_cz_msun", FLOAT, "Msun", "mass of the surface convective envelope"),
    _out("t_bcz_k", FLOAT, "K", "temperature at the base of the convective envelope"),
    _out("rho_bcz_gcc", FLOAT, "g/cm3", "density at the base of the convective envelope"),
    _out("r_bcz_rsun", FLOAT, "Rsun", "radius of the base of the convective envelope"),
    _out("m_li_preserved_msun", FLOAT, "Msun", "mass above the 2.5 MK isotherm (lithium-preserving layer)"),
    _out("envelope_quality", FLOAT, "", "envelope-integration code of the nearest grid point (see stars/envelope.py)"),
    _out("li_burning_timescale_myr", FLOAT, "Myr", "e-folding time of surface lithium by 7Li(p,a) at the envelope base "
         "(inf: the base is too cool for burning to matter, beyond 10^6 Myr)"),
    _out("deposition_scenario", TEXT, "", "which deposition scenario the ranking uses (config planet.deposition)"),
    _out("deposited_fraction_full", FLOAT, "", "fraction of the planet mixed into the envelope: all of it"),
    _out("deposited_fraction_ram_pressure", FLOAT, "", "fraction mixed in when ram pressure disrupts the planet (Jia & Spruit 2018)"),
    _out("deposited_fraction_virial", FLOAT, "", "fraction mixed in by the virial-temperature criterion (Siess & Livio 1999)"),
    _out("disruption_radius_ram_rsun", FLOAT, "Rsun", "where ram pressure disrupts the planet (NaN: reaches the base intact)"),
    _out("disruption_radius_virial_rsun", FLOAT, "Rsun", "where the envelope reaches the planet's virial temperature"),
    _out("a_li_base", FLOAT, "dex", "expected A(Li) of a normal star like this one (baseline)"),
    _out("a_li_scatter", FLOAT, "dex", "1-sigma star-to-star scatter of the baseline A(Li) (by stage for the prior)"),
    _out("li_rich_tail_fraction", FLOAT, "", "share of normal stars of the stage in the prior's Li-rich tail above "
         "A(Li) 1.5 (internal production near the helium flash; lithium.baseline): z_enrich counts core "
         "and tail together; red-clump stars below 2 M_sun only, 0 elsewhere and for a reference baseline"),
    _out("a_li_detection_limit", FLOAT, "dex", "A(Li) whose 6708 line equals the EW floor: a baseline below it "
         "is a set of upper limits, and z is measured from this limit (censored comparison)"),
    _out("a_li_enriched", FLOAT, "dex", "A(Li) right after the configured planet is mixed in"),
    _out("delta_a_li", FLOAT, "dex", "a_li_enriched - a_li_base"),
    _out("z_enrich", FLOAT, "sigma", "significance of the enrichment against the baseline: Gaussian-equivalent "
         "sigma of the chance that a normal star of the stage (scatter and Li-rich tail) shows it"),
    _out("p_detect", FLOAT, "", "probability (0 to 1) that the enrichment exceeds the threshold"),
    _out("lifetime_myr", FLOAT, "Myr", "how long the enrichment stays above the threshold"),
    _out("lifetime_end", TEXT, "", "what ends the signature: dilution, burning, main_sequence_depletion, "
         "thermohaline, fingering_mixing, end_of_track (below_threshold: no signature now)"),
    _out("lifetime_p16_myr", FLOAT, "Myr", "lifetime of the placement sample at the 16th percentile of z"),
    _out("lifetime_p84_myr", FLOAT, "Myr", "lifetime of the placement sample at the 84th percentile of z"),
    _out("placement_method", TEXT, "", "route used to place the star on tracks (see computable_from)"),
    _out("teff_source", TEXT, "", "where teff_k came from (catalog, or the colour relation used)"),
    _out("logl_source", TEXT, "", "where logl_lsun came from (catalog, parallax + bolometric correction, ...)"),
    _out("feh_source", TEXT, "", "where feh came from (catalog, cluster, default)"),
    _out("baseline_source", TEXT, "", "which lithium baseline relation gave a_li_base"),
    _out("z_enrich_err", FLOAT, "sigma", "spread of z_enrich over the placement samples"),
    _out("baseline_n", FLOAT, "", "reference stars behind the baseline (0 for the prior)"),
    _out("teff_zams_k", FLOAT, "K", "Teff of the star's track at the zero-age main sequence"),
    _out("a_li_main_sequence", FLOAT, "dex", "prior main-sequence A(Li) before dredge-up dilution"),
    _out("dilution_dex", FLOAT, "dex", "first-dredge-up dilution of the star's own lithium (<= 0)"),
    _out("m_planet_msun", FLOAT, "Msun", "planet mass mixed into the envelope"),
    _out("chi2_best", FLOAT, "", "chi^2 of the best-matching track point (posterior and isochrone routes)"),
    _out("m_planet_min_mjup", FLOAT, "Mjup", "smallest planet of the configured kind giving z >= threshold (full mixing; "
         "inf: no body up to 80 M_J can)"),
    _out("z_observed", FLOAT, "sigma", "measured A(Li) above the baseline, in sigma (baseline scatter + measurement error)"),
    _out("z_observed_is_limit", BOOL, "", "the measured A(Li) is an upper limit, so z_observed is an upper bound"),
    _out("m_planet_needed_mjup", FLOAT, "Mjup", "planet of the configured kind that would raise the baseline to the measured A(Li)"),
    _out("veq_kms", FLOAT, "km/s", "equatorial velocity 2 pi R / P_rot"),
    _out("veq_expected_kms", FLOAT, "km/s", "expected equatorial velocity for the star's mass, age and stage"),
    _out("veq_expected_spread_kms", FLOAT, "km/s", "1-sigma spread of the expectation"),
    _out("rot_expect_source", TEXT, "", "how the expectation was made (gyrochronology, cluster sequence, conservation)"),
    _out("rot_anomaly_sigma", FLOAT, "sigma", "how far the observed rotation is above the expectation"),
    _out("rapid_rotator", BOOL, "", "rot_anomaly_sigma >= rotation.rapid_anomaly_sigma (default 3)"),
    _out("m_planet_spin_mjup", FLOAT, "Mjup", "planet mass whose orbital angular momentum supplies the rotation excess"),
    _out("spin_li_consistency", TEXT, "", "whether the spin-up planet and the minimum Li planet agree"),
    _out("spin_up_kms", FLOAT, "km/s", "equatorial velocity the configured planet's orbital angular momentum adds"),
    _out("spin_visible_fraction", FLOAT, "", "share of the signature's lifetime during which that spin-up is still seen"),
    _out("rotation_likelihood_ratio", FLOAT, "", "p(rotation | recent engulfment) / p(rotation | normal), bounded "
         "(1 without rotation data)"),
    _out("p_engulfed_history", FLOAT, "", "probability the star engulfed such a planet within the signature's "
         "lifetime before now, from its radius history and planet occurrence"),
    _out("planets_swept", FLOAT, "", "expected number of such planets inside the capture radius swept in that window"),
    _out("capture_radius_now_rsun", FLOAT, "Rsun", "tidal capture radius now (from the largest radius so far)"),
    _out("capture_radius_then_rsun", FLOAT, "Rsun", "tidal capture radius one signature lifetime ago"),
    _out("p_background", FLOAT, "", "part of p_engulfed_history from dynamically delivered planets"),
    _out("p_engulfed", FLOAT, "", "P(engulfed | history, rotation) = p LR / (1 - p + p LR)"),
    _out("ew_base_mA", FLOAT, "mA", "Li I 6708 equivalent width at the baseline A(Li)"),
    _out("ew_enriched_mA", FLOAT, "mA", "Li I 6708 equivalent width after the engulfment"),
    _out("delta_ew_mA", FLOAT, "mA", "rise of the equivalent width above the baseline's (or the EW floor's)"),
    _out("line_fwhm_A", FLOAT, "A", "FWHM of the Li line: instrumental, thermal, rotational, doublet"),
    _out("snr_needed", FLOAT, "", "S/N per pixel to see delta_ew_mA at k sigma (Cayrel 1988), at least "
         "observing.min_snr_per_pixel"),
    _out("r_c_mag", FLOAT, "mag", "Cousins R from the catalog photometry"),
    _out("r_c_source", TEXT, "", "how r_c_mag was found: catalog R_C, G+BP-RP, V+B-V, or G/V with the "
         "colour the Teff implies (Casagrande et al. 2021, 2010; Alonso et al. 1999)"),
    _out("exposure_s", FLOAT, "s", "exposure to reach snr_needed (clipped to the instrument's floor/ceiling)"),
    _out("exposure_flag", TEXT, "", "ok, floor or ceiling"),
    _out("snr_at_exposure", FLOAT, "", "S/N per pixel reached in exposure_s"),
    _out("overhead_s", FLOAT, "s", "readout and acquisition"),
    _out("time_on_target_s", FLOAT, "s", "exposure_s + overhead_s"),
    _out("delta_ew_measurable", BOOL, "", "the EW rise exceeds the systematic floor (observing.ew_floor_mA)"),
    _out("p_measured", FLOAT, "", "(S/N reached / S/N needed)^2, at most 1; 0 when not measurable; x observing."
         "cool_measured_factor below observing.cool_limit_k (TiO blanketing)"),
    _out("instrument", TEXT, "", "instrument preset or file the cost is computed for"),
    _out("lines_to_measure", TEXT, "", "diagnostic lines worth taking in the same exposure"),
    _out("coverage_missing", TEXT, "", "diagnostics that apply but fall outside the instrument's coverage"),
))
"""Ranked-output columns with units; printed by the command line and the README."""


def format_column_table(columns: dict) -> str:
    """A plain-text table (name, unit, description) of :data:`INPUT_COLUMNS` or
    :data:`OUTPUT_COLUMNS`, for help texts and documentation."""
    width = max(len(name) for name in columns)
    unit_width = max(len(c.unit) for c in columns.values()) or 1
    lines = [f"{'column'.ljust(width)}  {'unit'.ljust(unit_width)}  meaning"]
    lines += [f"{c.name.ljust(width)}  {c.unit.ljust(unit_width)}  {c.description}"
              for c in columns.values()]
    return "\n".join(lines)
