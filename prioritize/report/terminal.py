"""Compact terminal summaries of a ranked table."""

from __future__ import annotations

import shutil
import textwrap

import pandas as pd

from .. import CAUTION
from ..catalog import status as st

TOP_COLUMNS = [("rank", "rank", "{:.0f}"), ("star_id", "star", "{}"), ("stage", "stage", "{}"),
               ("mass_msun", "M/Msun", "{:.2f}"), ("teff_k", "Teff/K", "{:.0f}"),
               ("m_cz_msun", "Mcz/Msun", "{:.3g}"), ("a_li_base", "A(Li)base", "{:.2f}"),
               ("delta_a_li", "dA(Li)", "{:+.2f}"), ("z_enrich", "z", "{:.1f}"),
               ("p_detect", "P(z>=thr)", "{:.2f}"), ("lifetime_myr", "life/Myr", "{:.3g}"),
               ("rot_anomaly_sigma", "rot/sig", "{:+.1f}"), ("ew_enriched_mA", "EW/mA", "{:.0f}"),
               ("snr_needed", "S/N", "{:.0f}"), ("exposure_s", "exp/s", "{:.0f}"),
               ("priority", "det/h", "{:.2e}")]


def _fmt(value, fmt):
    if value is None or (isinstance(value, float) and value != value):
        return "-"
    try:
        return fmt.format(value)
    except (ValueError, TypeError):
        return str(value)


# Columns left out first when the table is wider than the terminal (the rest stay).
DROP_ORDER = ("rot_anomaly_sigma", "m_cz_msun", "ew_enriched_mA", "snr_needed", "a_li_base", "teff_k",
              "delta_a_li", "lifetime_myr", "mass_msun", "p_detect")
MIN_WIDTH = 80
STAR_ID_WIDTH = 20


def top_table(table: pd.DataFrame, n: int, width: int | None = None) -> str:
    """The first ``n`` ranked rows as an aligned plain-text table no wider than
    ``width`` characters (default: the terminal's width, at least 80); columns of
    :data:`DROP_ORDER` are left out, in that order, until it fits."""
    if width is None:
        width = max(MIN_WIDTH, shutil.get_terminal_size((MIN_WIDTH, 24)).columns)
    rows = table[table["rank"].notna()].head(n).to_dict("records")
    columns = list(TOP_COLUMNS)

    def render(columns):
        header = [label for _, label, _ in columns]
        body = [[_fmt(r.get(col), fmt)[:STAR_ID_WIDTH] if col == "star_id" else _fmt(r.get(col), fmt)
                 for col, _, fmt in columns] for r in rows]
        widths = [max(len(h), *(len(b[i]) for b in body)) if body else len(h) for i, h in enumerate(header)]
        lines = ["  ".join(h.rjust(w) for h, w in zip(header, widths))]
        lines += ["  ".join(c.rjust(w) for c, w in zip(b, widths)) for b in body]
        return lines

    lines = render(columns)
    for name in DROP_ORDER:
        if max(map(len, lines)) <= width:
            break
        columns = [c for c in columns if c[0] != name]
        lines = render(columns)
    return "\n".join(lines)


def status_summary(table: pd.DataFrame, width: int | None = None) -> str:
    """Counts per status, with what each code means, and the signature tally; the
    sentences are wrapped to ``width`` (default: the terminal's width, at least 80)."""
    if width is None:
        width = max(MIN_WIDTH, shutil.get_terminal_size((MIN_WIDTH, 24)).columns)
    counts = table["status"].value_counts()
    lines = [f"{len(table)} stars read; status counts:"]
    for code in list(st.ALL) + sorted(set(counts.index) - set(st.ALL)):
        if code in counts:
            lines.append(f"  {code:<24} {counts[code]:>7}  {st.DESCRIPTIONS.get(code, '')}")
    ok = table[table["status"] == st.OK]
    if len(ok):
        lines.append(f"Of {len(ok)} computed stars, {int((ok['p_detect'] >= 0.5).sum())} have "
                     f"P(z >= threshold) >= 0.5 and {int((ok['priority'] > 0).sum())} a priority above 0 "
                     "(a signature that lasts, a measurable line rise and an exposure estimate).")
    ranked = table[table["rank"].notna()]
    if len(ranked) and "time_on_target_s" in ranked:
        hours = ranked["time_on_target_s"].to_numpy(float) / 3600.0
        inst = ranked["instrument"].iloc[0]
        lines.append(f"Time on target ({inst}, exposure + overheads): top 10 {hours[:10].sum():.1f} h, "
                     f"top 50 {hours[:50].sum():.1f} h, all ranked {hours.sum():.1f} h; "
                     f"expected detections in the top 10: {ranked['priority'].to_numpy(float)[:10].dot(hours[:10]):.2g}.")
    lines.append(f"Caution: {CAUTION}")
    return "\n".join(textwrap.fill(line, width, subsequent_indent=" " * 36 if line.startswith("  ") else "  ",
                                   ) if len(line) > width else line for line in lines)
