"""A self-contained HTML report of a log-scale analysis: one file, no network, figures inline.

:func:`build_report` runs the accessors on a table (overview counts, scale check, summary, fold
changes against a reference, figures) and writes them with a methods paragraph naming the formulas
and their published sources, and the cautions that apply to clinical, regulatory or safety use.
Figures are embedded as base64 PNG; the styling is one inline ``<style>`` block; nothing is fetched.
Every text taken from the data is escaped with :func:`html.escape`.
"""

from __future__ import annotations

import base64
import datetime
import hashlib
import html
import io
import platform
import sys
from collections.abc import Callable, Hashable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

import logstats
from logstats.format import (
    TIMES_DIVIDE,
    count_label,
    data_order,
    format_column,
    format_times_divide,
    in_data_order,
    is_text_column,
    joined_key,
)

__all__ = ["OPTIONAL_SECTIONS", "REFERENCES", "SECTIONS", "build_report", "reference_first"]

#: The ``id`` of every section, in order.
SECTIONS: tuple[str, ...] = (
    "overview", "scale-check", "summary", "comparisons", "figures", "methods", "cautions", "provenance",
)

#: Sections present only when asked for (``limit=``; ``nested=`` or nested ``replicate=``), placed after
#: the comparisons.
OPTIONAL_SECTIONS: tuple[str, ...] = ("upper-tail", "variance-components")

#: The published sources named in the methods paragraph.
REFERENCES: tuple[str, ...] = (
    "Akaike, H. (1974). A new look at the statistical model identification. IEEE Transactions on "
    "Automatic Control 19:716-723.",
    "Box, G. E. P. & Cox, D. R. (1964). An analysis of transformations. Journal of the Royal Statistical "
    "Society B 26:211-252.",
    "Benjamini, Y. & Hochberg, Y. (1995). Controlling the false discovery rate: a practical and "
    "powerful approach to multiple testing. Journal of the Royal Statistical Society B 57:289-300.",
    "Cohen, A. C. (1961). Tables for maximum likelihood estimates: singly truncated and singly "
    "censored samples. Technometrics 3:535-541.",
    "D'Agostino, R. B. & Pearson, E. S. (1973). Tests for departure from normality. Empirical results "
    "for the distributions of b2 and \u221ab1. Biometrika 60:613-622.",
    "Helsel, D. R. (2012). Statistics for Censored Environmental Data Using Minitab and R, 2nd ed. Wiley.",
    "Holm, S. (1979). A simple sequentially rejective multiple test procedure. Scandinavian Journal "
    "of Statistics 6:65-70.",
    "Kirkwood, T. B. L. (1979). Geometric means and measures of dispersion. Biometrics 35:908-909.",
    "Limpert, E., Stahel, W. A. & Abbt, M. (2001). Log-normal distributions across the sciences: "
    "keys and clues. BioScience 51:341-352.",
    "Lord, S. J., Velle, K. B., Mullins, R. D. & Fritz-Laylin, L. K. (2020). SuperPlots: "
    "communicating reproducibility and variability in cell biology. Journal of Cell Biology "
    "219:e202001064.",
    "NIST/SEMATECH e-Handbook of Statistical Methods, section on the lognormal distribution.",
    "Odeh, R. E. & Owen, D. B. (1980). Tables for Normal Tolerance Limits, Sampling Plans and Screening. "
    "Marcel Dekker.",
    "Searle, S. R., Casella, G. & McCulloch, C. E. (1992). Variance Components. Wiley.",
    "Schuirmann, D. J. (1987). A comparison of the two one-sided tests procedure and the power "
    "approach for assessing the equivalence of average bioavailability. Journal of "
    "Pharmacokinetics and Biopharmaceutics 15:657-680.",
    "Shapiro, S. S. & Wilk, M. B. (1965). An analysis of variance test for normality (complete "
    "samples). Biometrika 52:591-611.",
    "Welch, B. L. (1947). The generalization of \u201cStudent's\u201d problem when several different "
    "population variances are involved. Biometrika 34:28-35.",
)

_STYLE = """
body { font-family: system-ui, -apple-system, "Segoe UI", Helvetica, Arial, sans-serif; margin: 2em auto;
       max-width: 72em; padding: 0 1em; color: #1d1d1d; line-height: 1.45; }
h1 { font-size: 1.6em; margin-bottom: 0.2em; }
h2 { font-size: 1.25em; border-bottom: 1px solid #ccc; padding-bottom: 0.2em; margin-top: 2em; }
h3 { font-size: 1.05em; margin-bottom: 0.3em; }
div.table-wrap { max-width: 100%; overflow-x: auto; margin: 0.6em 0 1em 0; }
table { border-collapse: collapse; font-size: 0.9em; }
caption { text-align: left; color: #444; font-size: 0.9em; padding-bottom: 0.3em; }
dl.prov { display: grid; grid-template-columns: max-content 1fr; gap: 0.2em 1em; font-size: 0.92em; }
dl.prov dt { font-weight: 600; }
dl.prov dd { margin: 0; overflow-wrap: anywhere; }
dl.prov code { font-size: 0.95em; }
th, td { padding: 0.25em 0.7em; border-bottom: 1px solid #e3e3e3; }
th { white-space: nowrap; }
th { background: #f3f3f3; text-align: left; font-weight: 600; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
td.txt { text-align: left; white-space: nowrap; }
p.note { background: #fff7e0; border-left: 4px solid #e0a000; padding: 0.5em 0.8em; }
p.muted { color: #666; font-size: 0.9em; }
figure { margin: 1em 0 2em 0; }
figure img { max-width: 100%; height: auto; border: 1px solid #eee; }
figcaption { color: #444; font-size: 0.9em; }
section#cautions { background: #f6f6f6; padding: 0.2em 1em 0.8em 1em; border-radius: 4px; }
ol.refs li { margin-bottom: 0.3em; font-size: 0.92em; }
"""


# --------------------------------------------------------------------------------------------------
# HTML helpers


def _e(x: Any) -> str:
    return html.escape(str(x), quote=True)


def _table(df: pd.DataFrame | pd.Series, *, columns: Sequence[str] | None = None, digits: int = 3,
           times_divide: bool = True, caption: str | None = None) -> str:
    """A result table as HTML: index levels as the first columns, cells formatted as in the terminal."""
    if isinstance(df, pd.Series):
        df = df.to_frame().T
        df.index = pd.RangeIndex(1)
    cols = [c for c in (columns if columns is not None else df.columns) if c in df.columns]
    head: list[str] = []
    body_cols: list[tuple[list[str], str]] = []
    idx = df.index
    if not (isinstance(idx, pd.RangeIndex) and idx.name is None):
        for level in range(idx.nlevels):
            head.append("" if idx.names[level] is None else str(idx.names[level]))
            body_cols.append(([str(v) for v in idx.get_level_values(level)], "txt"))
    combine = times_divide and "gmean" in cols and "gsd" in cols
    for c in cols:
        if combine and c == "gsd":
            continue
        if combine and c == "gmean":
            head.append(f"gmean {TIMES_DIVIDE} gsd")
            body_cols.append(([format_times_divide(g, f, digits) for g, f in
                               zip(df["gmean"].to_numpy(), df["gsd"].to_numpy())], "num"))
            continue
        head.append(str(c))
        body_cols.append((format_column(df[c], c, digits=digits),
                          "txt" if is_text_column(df[c], c) else "num"))
    out = ['<div class="table-wrap"><table>']
    if caption:
        out.append(f"<caption>{_e(caption)}</caption>")
    out.append("<thead><tr>" + "".join(f"<th>{_e(h)}</th>" for h in head) + "</tr></thead>")
    out.append("<tbody>")
    for i in range(len(df)):
        out.append("<tr>" + "".join(f'<td class="{k}">{_e(cells[i])}</td>' for cells, k in body_cols)
                   + "</tr>")
    out.append("</tbody></table></div>")
    return "\n".join(out)


#: Figures drawn for the last report, kept only when a caller asks (``FIGURE_LOG`` set to a list):
#: the tests read each panel's scale from the Axes objects themselves.
FIGURE_LOG: list[Any] | None = None


def _figure_png(draw: Any, *, size: tuple[float, float], nrows: int = 1, ncols: int = 1,
                share: bool = False, alt: str, caption: str) -> str:
    """Draw on a fresh, pyplot-free Figure and embed it as a base64 PNG ``<figure>``.

    ``share=True`` links the axes of every panel; only for grids whose panels are all on one scale
    (the per-group histograms). Panels on different scales (logs beside raw values) never share:
    a shared axis would put both on the scale of whichever panel set it last.
    """
    from matplotlib.figure import Figure

    fig = Figure(figsize=size, layout="constrained")
    axes = fig.subplots(nrows, ncols, squeeze=False, sharex=share, sharey=share)
    draw(axes)
    if FIGURE_LOG is not None:
        FIGURE_LOG.append((caption, fig))
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=96)
    data = base64.b64encode(buf.getvalue()).decode("ascii")
    return (f'<figure><img alt="{_e(alt)}" src="data:image/png;base64,{data}">'
            f"<figcaption>{_e(caption)}</figcaption></figure>")


def _as_list(value: Any) -> list[Hashable]:
    if isinstance(value, (list, tuple)):
        return list(value)
    return [value]


def _rows_of(res: pd.DataFrame | pd.Series) -> pd.DataFrame:
    return res.to_frame().T if isinstance(res, pd.Series) else res


# --------------------------------------------------------------------------------------------------
# the report


@dataclass(frozen=True)
class _Report:
    """What every section of one report needs (the named steps of :func:`build_report`)."""

    df: pd.DataFrame
    acc: Any
    values: list[Hashable]
    keys: list[Hashable]
    by_arg: Any
    group_key: Any
    replicate: Any
    rep_levels: list[Hashable]
    unit: Hashable | None
    reference: Any
    detection_limit: Any
    dl_kw: dict[str, Any]
    nonpositive: str
    confidence_level: float
    pct: str
    adjust: str | None
    units: str | None
    unit_name: str | None
    what: str
    rows_name: str
    margin: float
    censored_method: str
    figures: bool
    n_groups: int
    source: str | None
    step: Callable[[str], None]


def _overview_section(r: _Report) -> tuple[list[str], pd.DataFrame | None]:
    """The data overview: rows, groups, replicates, and what was left out of the logs."""
    step = r.step
    df = r.df
    acc = r.acc
    values = r.values
    keys = r.keys
    by_arg = r.by_arg
    replicate = r.replicate
    rep_levels = r.rep_levels
    detection_limit = r.detection_limit
    nonpositive = r.nonpositive
    units = r.units
    what = r.what
    n_groups = r.n_groups
    source = r.source
    parts: list[str] = []
    # overview
    step("report: overview")
    parts.append('<section id="overview"><h2>Data overview</h2>')
    src = f" from <code>{_e(source)}</code>" if source else ""
    desc = f"{len(df)} rows{src}, {len(df.columns)} columns"
    if keys:
        desc += (f"; {n_groups} groups of " + " \u00d7 ".join(f"<code>{_e(k)}</code>" for k in keys))
        n_nokey = int(df[keys].isna().any(axis=1).sum())
        if n_nokey:
            desc += f" ({n_nokey} rows without a group are left out)"
    if replicate is not None:
        for depth in range(1, len(rep_levels) + 1):
            n_rep = len(df[[*keys, *rep_levels[:depth]]].dropna().drop_duplicates())
            kind = "replicates" if depth == 1 else "units"
            desc += f"; {n_rep} {kind} (<code>{_e(rep_levels[depth - 1])}</code>)"
    parts.append(f"<p>{desc}. Values analysed: {', '.join(f'<code>{_e(v)}</code>' for v in values)}"
                 + (f" ({_e(units)})" if units else "") + ".</p>")
    counts = acc.moments(by=by_arg, columns=values, nonpositive="drop")
    counts = _rows_of(counts)
    show = ["n", "n_missing", "n_nonpositive"]
    cens = None
    if detection_limit is not None:
        cens = _rows_of(acc.fit(by=by_arg, columns=values, detection_limit=detection_limit))
        if "n_censored" in cens.columns:
            nc = cens["n_censored"]
            counts = counts.assign(n_censored=(nc.reindex(counts.index) if not nc.index.equals(counts.index)
                                               else nc).to_numpy())
            show.append("n_censored")
    parts.append(_table(counts, columns=show))
    parts.append(f'<p class="muted"><code>n</code>: positive, finite {_e(what)} used; '
                 "<code>n_missing</code>: empty cells; <code>n_nonpositive</code>: values at or below "
                 "zero, whose logarithm is "
                 f"undefined (policy here: <code>nonpositive={_e(repr(nonpositive))}</code>)"
                 + ("; <code>n_censored</code>: non-detects at or below the detection limit "
                    f"<code>{_e(detection_limit)}</code>" if "n_censored" in show else "")
                 + ".</p>")
    parts.append("</section>")

    return parts, cens


def _scale_section(r: _Report) -> tuple[list[str], pd.DataFrame | None]:
    """Linear or log scale: per-group and pooled verdicts, Box-Cox, the scale figure."""
    step = r.step
    df = r.df
    acc = r.acc
    values = r.values
    keys = r.keys
    by_arg = r.by_arg
    group_key = r.group_key
    detection_limit = r.detection_limit
    dl_kw = r.dl_kw
    nonpositive = r.nonpositive
    confidence_level = r.confidence_level
    units = r.units
    margin = r.margin
    figures = r.figures
    n_groups = r.n_groups
    parts: list[str] = []
    # scale check
    step("report: scale check")
    parts.append('<section id="scale-check"><h2>Linear or log scale?</h2>')
    chk = acc.scale_check(by=by_arg, columns=values, nonpositive=nonpositive, margin=margin,
                          confidence_level=confidence_level, **dl_kw)
    parts.append(_table(chk, columns=["aic_normal", "aic_lognormal", "delta_aic", "preferred",
                                      "boxcox_lambda", "boxcox_ci_low", "boxcox_ci_high",
                                      "normality_test", "normality_p_linear", "normality_p_log",
                                      "mean", "gmean", "mean_ratio", "expected_ratio", "n_censored"]))
    parts.append("<p>The lower AIC marks the better-fitting scale (<code>delta_aic</code> = "
                 "<code>aic_normal</code> \u2212 <code>aic_lognormal</code>, positive favours the log "
                 "scale); both AICs are for the data on its original scale. A scale is "
                 "<code>preferred</code> "
                 f"only when its AIC is lower by at least {margin:g} (the margin); when "
                 f"|<code>delta_aic</code>| &lt; {margin:g} the verdict is <code>undecided</code>. "
                 "<code>boxcox_lambda</code> is the maximum-likelihood Box-Cox power with its "
                 f"{100 * confidence_level:g}\u00a0% profile-likelihood interval: 0 supports logs, 1 the "
                 "linear scale, 1/2 or 1/3 a power in between. For log-normal data the ratio of the "
                 "arithmetic to the geometric mean is close to exp(s\u00b2/2) (<code>expected_ratio</code>)"
                 + ("; with non-detects both likelihoods are the censored ones" if detection_limit is not None
                    else "") + ".</p>")
    verdicts = _verdict_sentences(_rows_of(chk), margin)
    if verdicts:
        parts.append("<ul>" + "".join(f"<li>{v}</li>" for v in verdicts) + "</ul>")
    pooled_chk = None
    if keys and n_groups > 1:
        pooled_chk = _rows_of(acc.scale_check(by=by_arg, columns=values, nonpositive=nonpositive,
                                              margin=margin,
                                              confidence_level=confidence_level, pooled=True, **dl_kw))
        parts.append("<h3>One verdict across the groups</h3>")
        parts.append(_table(pooled_chk, columns=["n_groups", "n", "delta_aic", "preferred", "boxcox_lambda",
                                                 "boxcox_ci_low", "boxcox_ci_high", "spread_slope",
                                                 "spread_slope_ci_low", "spread_slope_ci_high",
                                                 "implied_power", "n_censored"]))
        parts.append("<p>Each group keeps its own location and the scale question is asked of all "
                     "residuals together (one common spread and one common Box-Cox power), the right "
                     "question for a designed experiment with several conditions. <code>spread_slope</code> "
                     "is the slope of log SD on log mean over the groups (1: spread proportional to the "
                     "level, i.e. multiplicative; 0: additive; 1/2: counting-like), with its t interval on "
                     "<code>n_groups</code> \u2212 2 degrees of freedom; <code>implied_power</code> = 1 "
                     "\u2212 slope.</p>")
        notes = [str(t) for t in pooled_chk.get("note", pd.Series(dtype=object)).dropna().unique() if t]
        for text in notes:
            parts.append(f'<p class="muted">{_e(text)}</p>')
    if figures:
        for v in values:
            parts.append(_figure_png(
                lambda axes, v=v: _plot_scale(df, v, group_key, pooled_chk is not None, confidence_level,
                                              margin, detection_limit, nonpositive, units, axes),
                size=(11.0, 4.2), ncols=2, alt=f"Box-Cox profile and mean-spread plot of {v}",
                caption=f"Box-Cox profile of {v} (left, linear axes): profile log-likelihood of the power "
                        "\u03bb relative to its maximum, \u03bb = 0 (logs) and 1 (linear) marked, the "
                        "interval "
                        "shaded. Mean-spread plot (right, log-log axes): group SD against group mean with "
                        "the fitted slope and guides of slope 0 and 1."))
    parts.append("</section>")

    return parts, pooled_chk


def _summary_section(r: _Report, cens: pd.DataFrame | None) -> list[str]:
    """The log-scale summary, the replicate-level summary and the censored fit."""
    step = r.step
    acc = r.acc
    values = r.values
    keys = r.keys
    by_arg = r.by_arg
    replicate = r.replicate
    rep_levels = r.rep_levels
    unit = r.unit
    detection_limit = r.detection_limit
    nonpositive = r.nonpositive
    confidence_level = r.confidence_level
    pct = r.pct
    what = r.what
    censored_method = r.censored_method
    parts: list[str] = []
    # summary
    step("report: summary")
    parts.append('<section id="summary"><h2>Summary on the log scale</h2>')
    if detection_limit is None:
        summ = acc.summary(by=by_arg, columns=values, confidence_level=confidence_level,
                           nonpositive=nonpositive, linear=True)
    else:
        summ = acc.summary(by=by_arg, columns=values, confidence_level=confidence_level,
                           nonpositive=nonpositive, detection_limit=detection_limit,
                           censored_method=censored_method)
    parts.append(_table(summ, columns=["n", "n_nonpositive", "n_censored", "gmean", "gsd", "gcv", "ci_low",
                                       "ci_high", "median", "mean", "sd"]))
    parts.append(f"<p><code>n</code> counts {_e(what)}. <code>gmean {TIMES_DIVIDE} gsd</code> covers "
                 f"about 68\u00a0% of a log-normal population; <code>ci_low</code>\u2013<code>ci_high</code> "
                 f"is the {pct} confidence interval of the geometric mean. "
                 + ("<code>median</code>, <code>mean</code> and <code>sd</code> are on the linear scale, for "
                    "comparison.</p>" if detection_limit is None else
                    f"Non-detects (<code>n_censored</code>, at or below <code>{_e(detection_limit)}</code>) "
                    "enter through the "
                    + {"mle": "censored log-normal maximum likelihood fit",
                       "ros": "robust regression on order statistics (Helsel 2012)",
                       "km": "Kaplan-Meier estimate on the flipped logs (Helsel 2012)"}.get(censored_method,
                                                                                          censored_method)
                    + "; no value is substituted, so no linear-scale median, mean or SD is shown.</p>"))
    if replicate is not None and detection_limit is None:
        per_rep = acc.gmean(by=[*keys, *rep_levels], columns=values, nonpositive=nonpositive)
        rep_col = values[0] if len(values) == 1 else None
        for depth in range(len(rep_levels) - 1, 0, -1):  # nested: log means up the nesting
            if rep_col is None:
                break
            frame = (per_rep[[rep_col]] if isinstance(per_rep, pd.DataFrame)
                     else per_rep.rename(rep_col).to_frame()).dropna().reset_index()
            per_rep = frame.logstats.gmean(by=[*keys, *rep_levels[:depth]], columns=rep_col)
        if rep_col is not None:
            reps = (per_rep[[rep_col]] if isinstance(per_rep, pd.DataFrame)
                    else per_rep.rename(rep_col).to_frame())
            summ_rep = reps[rep_col].dropna().logstats.summary(by=by_arg, confidence_level=confidence_level)
            if not isinstance(summ.index, pd.MultiIndex):
                summ_rep = summ_rep.reindex(summ.index.intersection(summ_rep.index, sort=False))
            parts.append(f"<h3>With the replicate (<code>{_e(unit)}</code>) as the unit</h3>")
            parts.append(_table(summ_rep, columns=["n", "gmean", "gsd", "ci_low", "ci_high"]))
            parts.append(f'<p class="muted"><code>n</code> counts {_e(unit)} replicates; '
                         "<code>gmean</code> is the geometric mean of the replicates\u2019 geometric "
                         "means" + (" (each the geometric mean of its " + " of ".join(
                             _e(x) for x in rep_levels[1:][::-1]) + " means)" if len(rep_levels) > 1 else "")
                         + ".</p>")
    if cens is not None:
        parts.append(f"<h3>Log-normal fit, left-censored at the detection limit "
                     f"(<code>{_e(detection_limit)}</code>)</h3>")
        parts.append(_table(cens, columns=["mu", "sigma", "n", "n_censored", "loglik", "converged"]))
        parts.append('<p class="muted"><code>mu</code> and <code>sigma</code> are the maximum-likelihood '
                     "mean and SD (ddof = 0) of the natural logs, non-detects included through the "
                     "likelihood; exp(<code>mu</code>) estimates the geometric mean"
                     + (" (the summary above uses this fit)" if censored_method == "mle" else "") + ".</p>")
    parts.append("</section>")

    return parts


def _comparisons_section(r: _Report) -> list[str]:
    """Fold changes against the reference (replicate as the unit where given)."""
    step = r.step
    acc = r.acc
    values = r.values
    keys = r.keys
    replicate = r.replicate
    rep_levels = r.rep_levels
    unit = r.unit
    reference = r.reference
    detection_limit = r.detection_limit
    dl_kw = r.dl_kw
    nonpositive = r.nonpositive
    confidence_level = r.confidence_level
    pct = r.pct
    adjust = r.adjust
    unit_name = r.unit_name
    what = r.what
    rows_name = r.rows_name
    parts: list[str] = []
    # comparisons
    step("report: comparisons")
    parts.append('<section id="comparisons"><h2>Comparisons</h2>')
    cmp_cols = ["ratio", "ci_low", "ci_high", "p_value", "p_adjusted", "n", "n_reference", rows_name,
                f"{rows_name}_reference"]
    if reference is None:
        parts.append('<p class="muted">No reference level given, so no fold changes were computed '
                     "(pass <code>reference=</code>).</p>")
    else:
        compared = keys[0]
        kw: dict[str, Any] = dict(by=compared, reference=reference, columns=values,
                                  confidence_level=confidence_level, adjust=adjust, nonpositive=nonpositive)
        if len(keys) > 1:
            kw["within"] = keys[1] if len(keys) == 2 else keys[1:]
            parts.append(f"<p>Levels of <code>{_e(compared)}</code> are compared with "
                         f"<code>{_e(reference)}</code> within each level of "
                         + " \u00d7 ".join(f"<code>{_e(k)}</code>" for k in keys[1:]) + ".</p>")

        def shown(table: pd.DataFrame) -> pd.DataFrame:
            table = _without_reference(table, compared, reference)
            return table.rename(columns={c: count_label(c, unit_name=unit_name) for c in table.columns})

        if detection_limit is not None:
            cmp_cols += ["n_censored", "n_censored_reference"]
        if replicate is not None and detection_limit is not None:
            try:
                fc = acc.fold_change(replicate=replicate, detection_limit=detection_limit, **kw)
            except ValueError as exc:
                parts.append(f'<p class="note">No replicate-level comparison with non-detects: {_e(exc)}. '
                             "The comparison below uses every value as a unit with the censored regression; "
                             "its intervals are too narrow when values of one replicate share its conditions "
                             "(pseudo-replication).</p>")
                fc = acc.fold_change(detection_limit=detection_limit, **kw)
                parts.append(_table(shown(fc), columns=cmp_cols))
            else:
                parts.append(_table(shown(fc), columns=cmp_cols))
            empty = fc
        elif replicate is not None:
            fc = acc.fold_change(replicate=replicate, **kw)
            parts.append(f"<h3>Replicate (<code>{_e(unit)}</code>) as the unit</h3>")
            nested_cols = [c for lv in rep_levels[1:] for c in (f"n_{lv}", f"n_{lv}_reference")]
            parts.append(_table(shown(fc), columns=cmp_cols[:7] + nested_cols + cmp_cols[7:]))
            parts.append(f'<p class="muted"><code>n</code> and <code>n_reference</code> count '
                         f"{_e(unit)} replicates; <code>{_e(rows_name)}</code> and "
                         f"<code>{_e(rows_name)}_reference</code> count {_e(what)}"
                         + (". Values are averaged on the log scale up the nesting "
                            + " &gt; ".join(f"<code>{_e(x)}</code>" for x in rep_levels)
                            + " (an inner label is read within its outer level)"
                            if len(rep_levels) > 1 else "")
                         + ".</p>")
            cells = acc.fold_change(**kw)
            parts.append("<h3>Each row as a unit (for contrast only)</h3>")
            parts.append(_table(shown(cells), columns=cmp_cols))
            parts.append(f"<p>The per-row answer treats every one of the {_e(what)} as independent; "
                         "rows of one replicate share its conditions, so its intervals are too narrow "
                         "and its p-values too small (pseudo-replication). Use the replicate answer.</p>")
            empty = fc
        else:
            fc = acc.fold_change(**kw, **dl_kw)
            parts.append(_table(shown(fc), columns=cmp_cols))
            empty = fc
        if detection_limit is not None:
            parts.append('<p class="muted">Non-detects: censored regression on the logs with a common spread '
                         "(ratio = exp(level effect), Wald interval, likelihood-ratio p-value); no value is "
                         "substituted.</p>")
        rest = _without_reference(empty, compared, reference)
        n_empty = int(rest["ratio"].isna().sum()) if "ratio" in rest.columns else 0
        if n_empty:
            parts.append(f'<p class="note">{n_empty} of {len(rest)} comparison(s) have no ratio (NaN): '
                         "a group or the reference has no usable unit there (see <code>n</code> and "
                         "<code>n_reference</code>).</p>")
        parts.append(f"<p><code>ratio</code> is the geometric mean of each level divided by that of "
                     f"<code>{_e(reference)}</code>, with its {pct} interval; <code>p_adjusted</code> "
                     f"controls multiplicity ({_e(adjust)}).</p>")
    parts.append("</section>")

    return parts


def build_report(
    df: pd.DataFrame,
    *,
    value: Hashable | Sequence[Hashable],
    by: Hashable | Sequence[Hashable] | None = None,
    replicate: Hashable | Sequence[Hashable] | None = None,
    reference: Any = None,
    path: str | Path | None = None,
    detection_limit: Any = None,
    nonpositive: str = "raise",
    confidence_level: float = 0.95,
    adjust: str | None = "holm",
    units: str | None = None,
    unit_name: str | None = None,
    title: str | None = None,
    note: str | None = None,
    source: str | None = None,
    command: str | None = None,
    figures: bool = True,
    progress: Callable[[str], None] | None = None,
    limit: Any = None,
    nested: Sequence[Hashable] | None = None,
    margin: float = 2.0,
    censored_method: str = "mle",
    coverage: float = 0.95,
) -> str:
    """Analyse ``df`` and return (and with ``path``, write) one self-contained HTML report.

    Sections (each a ``<section>`` with the ``id`` in :data:`SECTIONS`): the data overview (rows,
    groups, and per value column the missing, non-positive and censored counts), the linear-vs-log
    scale check, the summary table (geometric mean ×/÷ GSD, its t interval, median, mean, SD), the
    fold changes against ``reference`` (with the replicate as the unit when ``replicate`` is given,
    and the per-row answer beside it), the figures (base64 PNG), a methods paragraph naming the
    formulas and their published sources, the cautions for clinical, regulatory or safety use, and
    the provenance (date, the command or call, versions, and the input file's size and SHA-256).

    Groups appear in one order everywhere: a categorical key's category order, a numeric or date
    key ascending, month or weekday names in calendar order, other text in natural order ("dish 2"
    before "dish 10"; :func:`logstats.format.data_order`);
    with a ``reference`` that level comes first. Wide tables scroll sideways inside the page.

    Parameters
    ----------
    df : DataFrame
        One row per cell or sample. Not modified.
    value : column name or list of names
        The value column(s) analysed.
    by : column name or list of names, optional
        Group key(s) (e.g. treatment, or month and site). Needed for comparisons; with several keys
        the levels of the first are compared within each combination of the others, and the
        figures show one group per combination.
    replicate : column name, or list of nested column names (outermost first), optional
        Experimental unit within each group (well, animal, day …); comparisons then use replicate
        means (Lord et al. 2020) and the figure shows them. Nested replicates (``["day", "well"]``)
        are averaged on the log scale up the nesting, the outermost is the unit, and a
        variance-components section is added.
    reference : label, optional
        The level of the first ``by`` key the others are compared with.
    path : path, optional
        Write the HTML here (UTF-8) as well as returning it.
    detection_limit : number or column name, optional
        Values at or below it are non-detects: the summary, the scale check, the comparisons and the
        upper tail then come from censored likelihoods (nothing is substituted), every table says so,
        and the censored fit and counts are shown.
    nonpositive : {"raise", "drop", "nan"}
        Zeros and negatives, as in the accessors; the overview always counts them.
    confidence_level : float, default 0.95
    adjust : {"holm", "bh", None}
        Multiplicity adjustment of the comparisons.
    units : str, optional
        Units of the values, for figure axes and the overview.
    unit_name : str, optional
        What one row is ("cells", "samples", "days"): the comparison's count of rows is headed
        ``n_<unit_name>`` (default ``n_values``).
    title, note : str, optional
        Report title and a highlighted note (e.g. that the data are invented).
    source : str, optional
        The input file (shown in the overview; when it names a file, its size and SHA-256 go into the
        provenance) or a short description of where the data came from.
    command : str, optional
        The command line or call that made the report, for the provenance (default: the call to this
        function, rebuilt from its arguments).
    figures : bool, default True
        False leaves out the figures (no matplotlib needed).
    progress : callable, optional
        Called with a short text before each step (the command line prints these on a terminal).
    limit : number or column name, optional
        A limit in data units (regulatory, exposure, specification): adds the upper-tail section
        (percentiles with exact intervals, tolerance limits, exceedance of the limit) and draws the
        limit on the histogram and group figures.
    nested : list of column names, optional
        Nesting levels, outermost first, for the variance-components section.
    margin : float, default 2
        AIC margin of the scale verdict ("undecided" when |delta AIC| < margin).
    censored_method : {"mle", "ros", "km"}
        How the summary is estimated with non-detects.
    coverage : float, default 0.95
        Population share of the tolerance limits.

    Returns
    -------
    str
        The HTML document.

    Raises
    ------
    KeyError, TypeError, ValueError
        From the accessors, naming the column at fault (e.g. non-positive values with
        ``nonpositive="raise"``).

    Notes
    -----
    Where results can feed clinical, regulatory or safety decisions (exceedance of limits, tolerance
    limits), use validated tools, qualified review, and the local rules and licensed practice that
    apply; the report says so in its cautions section and beside the upper tail.
    """
    if not isinstance(df, pd.DataFrame):
        raise TypeError(f"build_report needs a pandas DataFrame, got {type(df).__name__}")
    call = command or _python_call(value=value, by=by, replicate=replicate, reference=reference,
                                   path=path, detection_limit=detection_limit, nonpositive=nonpositive,
                                   confidence_level=confidence_level, adjust=adjust, units=units,
                                   unit_name=unit_name, title=title, source=source, figures=figures,
                                   limit=limit, nested=nested, margin=margin, censored_method=censored_method,
                                   coverage=coverage)
    step = progress if progress is not None else (lambda text: None)
    values = _as_list(value)
    keys = _as_list(by) if by is not None else []
    rep_levels = _as_list(replicate) if replicate is not None else []
    if isinstance(replicate, (list, tuple)):
        replicate = list(replicate) if len(replicate) > 1 else (replicate[0] if replicate else None)
        rep_levels = _as_list(replicate) if replicate is not None else []
    unit: Hashable | None = rep_levels[0] if rep_levels else None
    nest = list(nested) if nested is not None else (rep_levels if len(rep_levels) > 1 else [])
    missing = [c for c in values + keys + rep_levels + nest
               + ([limit] if isinstance(limit, str) else []) if c not in df.columns]
    if missing:
        raise KeyError(f"columns {missing!r} are not in the data; there are {list(df.columns)!r}")
    if reference is not None and not keys:
        raise ValueError("reference= needs by= (the column whose levels are compared)")
    if replicate is not None and not keys:
        raise ValueError("replicate= needs by= (the column whose levels the replicates belong to)")
    if isinstance(detection_limit, str) and detection_limit not in df.columns:
        raise KeyError(f"detection_limit={detection_limit!r} is not a column; there are {list(df.columns)!r}")
    if reference is not None:
        df, reference = reference_first(df, keys[0], reference)
    df = in_data_order(df, keys)
    by_arg: Any = None if not keys else (keys[0] if len(keys) == 1 else keys)
    group_key: Any = by_arg if len(keys) <= 1 else joined_key(df, keys)
    acc = df.logstats
    key_text = " and ".join(map(str, keys))
    title = title or f"logstats report: {', '.join(map(str, values))}" + (f" by {key_text}" if keys else "")
    made = datetime.datetime.now(datetime.timezone.utc).replace(microsecond=0)
    rows_name = count_label("n_cells", unit_name=unit_name)

    parts: list[str] = []
    parts.append(f"<h1>{_e(title)}</h1>")
    parts.append(f'<p class="muted">Made {_e(made.strftime("%Y-%m-%d %H:%M UTC"))} with logstats '
                 f"{_e(logstats.__version__)} (numpy {_e(np.__version__)}, pandas {_e(pd.__version__)}); "
                 'the command, versions and input checksum are under <a href="#provenance">Provenance'
                 "</a>.</p>")
    if note:
        parts.append(f'<p class="note">{_e(note)}</p>')

    what = unit_name or "values"
    pct = f"{100 * confidence_level:g}\u00a0%"
    dl_kw: dict[str, Any] = {} if detection_limit is None else {"detection_limit": detection_limit}
    n_groups = int(df[keys].dropna().drop_duplicates().shape[0]) if keys else 1
    r = _Report(df=df, acc=acc, values=values, keys=keys, by_arg=by_arg, group_key=group_key,
                replicate=replicate, rep_levels=rep_levels, unit=unit, reference=reference,
                detection_limit=detection_limit, dl_kw=dl_kw, nonpositive=nonpositive,
                confidence_level=confidence_level, pct=pct, adjust=adjust, units=units, unit_name=unit_name,
                what=what, rows_name=rows_name, margin=margin, censored_method=censored_method,
                figures=figures, n_groups=n_groups, source=source, step=step)
    ov_parts, cens = _overview_section(r)
    parts += ov_parts
    sc_parts, _pooled = _scale_section(r)
    parts += sc_parts
    parts += _summary_section(r, cens)
    parts += _comparisons_section(r)

    if limit is not None:
        step("report: upper tail")
        parts.append(_upper_tail(acc, by_arg, values, limit, coverage, confidence_level, nonpositive,
                                 detection_limit))
    if nest:
        step("report: variance components")
        parts.append(_components(acc, by_arg, values, nest, confidence_level, nonpositive))

    # ---- figures
    step("report: figures")
    parts.append('<section id="figures"><h2>Figures</h2>')
    if figures:
        parts.extend(_figures(df, values, group_key, unit, detection_limit, nonpositive,
                              confidence_level, units, step, limit=limit))
    else:
        parts.append('<p class="muted">Figures were left out.</p>')
    parts.append("</section>")

    parts.append(_methods(replicate is not None, detection_limit is not None, adjust, confidence_level,
                          margin=margin, tails=limit is not None, components=bool(nest),
                          censored_method=censored_method))
    parts.append(_cautions(tails=limit is not None))
    step("report: provenance (input checksum)")
    parts.append(_provenance(made, call, source, df, figures))
    parts.append('<section id="references"><h2>References</h2><ol class="refs">'
                 + "".join(f"<li>{_e(r)}</li>" for r in REFERENCES) + "</ol></section>")

    doc = ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
           '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
           f"<title>{_e(title)}</title>\n<style>{_STYLE}</style>\n</head>\n<body>\n"
           + "\n".join(parts) + "\n</body>\n</html>\n")
    if path is not None:
        Path(path).write_text(doc, encoding="utf-8")
    return doc


def _python_call(**kw: Any) -> str:
    """The call to :func:`build_report` as a user would have typed it (defaults left out)."""
    defaults = {"by": None, "replicate": None, "reference": None, "path": None, "detection_limit": None,
                "nonpositive": "raise", "confidence_level": 0.95, "adjust": "holm", "units": None,
                "unit_name": None, "title": None, "source": None, "figures": True, "limit": None,
                "nested": None, "margin": 2.0, "censored_method": "mle", "coverage": 0.95}
    args = [f"{k}={str(v) if isinstance(v, Path) else v!r}" for k, v in kw.items()
            if k not in defaults or not _same(v, defaults[k])]
    return "logstats.report.build_report(df, " + ", ".join(args) + ")"


def _same(a: Any, b: Any) -> bool:
    try:
        return bool(a == b) and type(a) is type(b)
    except (TypeError, ValueError):
        return False


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def _provenance(made: datetime.datetime, call: str, source: str | None, df: pd.DataFrame,
                figures: bool) -> str:
    """Date, command, versions and the input file (name, size, SHA-256), as a definition list."""
    import scipy

    versions = [("logstats", logstats.__version__), ("numpy", np.__version__), ("scipy", scipy.__version__),
                ("pandas", pd.__version__)]
    if figures:
        import matplotlib

        versions.append(("matplotlib", matplotlib.__version__))
    versions.append(("Python", f"{platform.python_version()} ({sys.platform})"))
    items = [("Date", made.isoformat().replace("+00:00", "Z")), ("Command", f"<code>{_e(call)}</code>")]
    if source is not None and Path(source).is_file():
        p = Path(source)
        size = p.stat().st_size
        items.append(("Input file", f"<code>{_e(p.name)}</code> ({_e(f'{size:,}')} bytes)"))
        items.append(("SHA-256", f"<code>{_sha256(p)}</code>"))
    elif source is not None:
        items.append(("Input", _e(source)))
    else:
        items.append(("Input", f"a DataFrame in memory ({len(df)} rows \u00d7 {len(df.columns)} columns)"))
    items.append(("Versions", ", ".join(f"{_e(n)} {_e(v)}" for n, v in versions)))
    return ('<section id="provenance"><h2>Provenance</h2><dl class="prov">'
            + "".join(f"<dt>{k}</dt><dd>{v}</dd>" for k, v in items) + "</dl></section>")


def reference_first(df: pd.DataFrame, by: Hashable, reference: Any) -> tuple[pd.DataFrame, Any]:
    """``df`` with the ``reference`` level of ``by`` first (the others in data order), and the level.

    A level also matches by its text (``"10"`` finds the number 10), as read from a command line.
    A categorical ``by`` keeps its own order. The other levels follow
    :func:`logstats.format.data_order` (numbers ascending, month names in calendar order, other
    text in natural order).
    The input is not modified (a copy is returned).

    Raises
    ------
    ValueError
        When ``reference`` is not a level of ``by``, listing the levels.
    """
    levels = data_order(df[by])
    match = [lv for lv in levels if lv == reference] or [lv for lv in levels if str(lv) == str(reference)]
    if not match:
        shown = ", ".join(repr(v) for v in levels[:12])
        more = f" and {len(levels) - 12} more" if len(levels) > 12 else ""
        raise ValueError(f"reference={reference!r} is not a level of {by!r}; its levels are {shown}{more}")
    ref = match[0]
    if isinstance(df[by].dtype, pd.CategoricalDtype):
        return df, ref
    others = [lv for lv in levels if not (lv == ref)]
    return df.assign(**{str(by): pd.Categorical(df[by], categories=[ref, *others])}), ref


def _without_reference(table: pd.DataFrame, by: Hashable, reference: Any) -> pd.DataFrame:
    idx = table.index
    if by in (idx.names or []):
        return table[idx.get_level_values(idx.names.index(by)) != reference]
    return table


def _figures(df: pd.DataFrame, values: list[Hashable], by: Any, replicate: Hashable | None,
             detection_limit: Any, nonpositive: str, confidence_level: float, units: str | None,
             step: Callable[[str], None], *, limit: Any = None) -> list[str]:
    from logstats import plot

    out = []
    if detection_limit is not None and nonpositive == "raise":
        nonpositive = "drop"  # zeros at or below the limit are non-detects: left out here, counted
    key = df[by] if by is not None and not isinstance(by, pd.Series) else by
    ngroups = len(data_order(key)) if key is not None else 1
    ncols = int(np.ceil(np.sqrt(ngroups)))
    nrows = int(np.ceil(ngroups / ncols))
    for v in values:
        step(f"report: figures of {v}")
        out.append(f"<h3><code>{_e(v)}</code></h3>")
        out.append(_figure_png(
            lambda axes, v=v: plot.hist(df, v, by=by, ax=axes if ngroups > 1 else axes[0, 0],
                                        normal=True, nonpositive=nonpositive, units=units,
                                        detection_limit=detection_limit, limit=limit),
            size=(3.6 * ncols, 2.8 * nrows + 0.5), nrows=nrows, ncols=ncols, share=True,
            alt=f"histogram of {v} on log-spaced bins",
            caption="Histogram on log-spaced bins (log x axis) with the fitted log-normal density (solid) "
                    "and the fitted normal density (dashed), per group; a log-normal sample follows the "
                    "solid curve." + (" The limit is the dashed vertical line labelled \u201climit\u201d."
                                      if limit is not None else "")))
        if by is not None:
            out.append(_figure_png(
                lambda axes, v=v: plot.groups(df, v, by=by, replicate=replicate, nonpositive=nonpositive,
                                              confidence_level=confidence_level, units=units,
                                              ax=axes[0, 0], limit=limit),
                size=(min(max(5.0, 1.6 * ngroups + 3.2), 14.0), 4.8),
                alt=f"{v} per group on a log axis",
                caption="Every value as a faint point on a log y axis"
                        + (f"; large markers are the geometric means of each {replicate}" if replicate
                           else "")
                        + f"; the black diamond and bar are the geometric mean \u00d7/\u00f7 its "
                          f"{100 * confidence_level:g} % confidence interval"
                        + (f" with the {replicate} as the unit." if replicate else ".")
                        + (" The limit is the dashed horizontal line labelled \u201climit\u201d."
                           if limit is not None else "")))
        out.append(_figure_png(
            lambda axes, v=v: plot.qq(df, v, by=by, nonpositive=nonpositive, units=units,
                                      ax=axes[0]),
            size=(9.6 if ngroups <= 4 else 11.5, 4.0), ncols=2,
            alt=f"normal probability plots of {v}: logs and raw values",
            caption="Normal probability plots: ordered logs (left, log axis) and ordered raw values "
                    "(right, linear axis) against normal quantiles. Points on the line mean the scale "
                    "is the right one."))
    return out


_TAIL_CAUTION_HTML = ("Percentiles, tolerance limits and exceedance fractions are often compared with "
                      "regulatory, "
                      "exposure or specification limits. For clinical, regulatory or safety decisions use "
                      "validated tools, qualified review, and the local rules and licensed practice that "
                      "apply; "
                      "these results support and do not replace them.")


def _verdict_sentences(chk: pd.DataFrame, margin: float) -> list[str]:
    """One sentence per group explaining the scale verdict (HTML, escaped)."""
    out = []
    for label, row in chk.iterrows():
        name = _e(" / ".join(map(str, label)) if isinstance(label, tuple) else label)
        d = row.get("delta_aic", np.nan)
        verdict = row.get("preferred")
        lam, lo, hi = (row.get("boxcox_lambda", np.nan), row.get("boxcox_ci_low", np.nan),
                       row.get("boxcox_ci_high", np.nan))
        if not isinstance(d, (int, float, np.floating)) or not np.isfinite(d):
            out.append(f"<b>{name}</b>: no verdict (too few usable values).")
            continue
        if verdict == "undecided":
            text = (f"AIC differs by only {abs(d):.2f} (less than the margin {margin:g}), so the data do not "
                    "choose between the scales")
        else:
            better = "log-normal" if verdict == "log" else "normal"
            text = (f"the {better} model is better by {abs(d):.2f} AIC units (at least the margin "
                    f"{margin:g}), so the {_e(verdict)} scale is preferred")
        if np.isfinite(lam) and np.isfinite(lo) and np.isfinite(hi):
            supported = [f"{v:g}" for v in (0.0, 1 / 3, 0.5, 1.0) if lo <= v <= hi]
            names = {"0": "0 (logs)", "0.333333": "1/3", "0.5": "1/2", "1": "1 (linear)"}
            def two(v: float) -> str:  # no "-0.00": a power that rounds to zero reads as 0.00
                return f"{v:.2f}".replace("-0.00", "0.00")

            text += (f"; the Box-Cox power is {two(lam)} (interval {two(lo)} to {two(hi)}), which "
                     + ("supports " + ", ".join(names.get(v, v) for v in supported) if supported
                        else "excludes 0, 1/3, 1/2 and 1") )
        out.append(f"<b>{name}</b>: {text}.")
    return out


def _plot_scale(df: pd.DataFrame, v: Hashable, by: Any, pooled: bool, confidence_level: float, margin: float,
                detection_limit: Any, nonpositive: str, units: str | None, axes: Any) -> Any:
    from logstats import plot

    return plot.scale(df, v, by=by, pooled=pooled, confidence_level=confidence_level, margin=margin,
                      detection_limit=detection_limit, nonpositive=nonpositive, units=units,
                      ax=[axes[0, 0], axes[0, 1]])


def _upper_tail(acc: Any, by: Any, values: list[Hashable], limit: Any, coverage: float,
                confidence_level: float, nonpositive: str, detection_limit: Any) -> str:
    """The upper-tail section: percentiles with exact intervals, tolerance limits, exceedance."""
    pct = f"{100 * confidence_level:g}\u00a0%"
    kw: dict[str, Any] = dict(by=by, columns=values, confidence_level=confidence_level,
                              nonpositive=nonpositive)
    if detection_limit is not None:
        kw["detection_limit"] = detection_limit
    quant = acc.quantile(q=[0.9, 0.95, 0.99], **kw)
    tol = acc.tolerance_limit(coverage=coverage, side="upper", **kw)
    exc = acc.exceedance(limit=limit, **kw)
    cens = ["n_censored"] if detection_limit is not None else []
    shown = _e(limit if isinstance(limit, str) else f"{float(limit):g}")
    parts = ['<section id="upper-tail"><h2>Upper tail and the limit</h2>',
             f'<p class="note">{_e(_TAIL_CAUTION_HTML)}</p>',
             f"<h3>Share of the population above the limit ({shown})</h3>",
             _table(exc, columns=["limit", "fraction", "ci_low", "ci_high", "n_exceed", "n", *cens]),
             f"<p><code>fraction</code> = 1 \u2212 \u03a6((ln L \u2212 \u0233)/s) is the share of the fitted "
             f"log-normal above the limit L, with its exact {pct} interval (the non-central t inverted); "
             "<code>n_exceed</code> counts the observed values above it.</p>",
             f"<h3>Upper tolerance limit ({100 * coverage:g}\u00a0% of the population, {pct} "
             "confidence)</h3>",
             _table(tol, columns=["tolerance_high", "n", *cens]),
             "<h3>Percentiles</h3>",
             _table(quant, columns=["estimate", "ci_low", "ci_high", "n", *cens]),
             f"<p>Percentiles exp(\u0233 + z<sub>q</sub>\u00b7s) (s with ddof = 1) with exact equal-tailed "
             f"{pct} intervals from the non-central t; the one-sided tolerance limit uses the exact "
             "non-central t factor (Odeh &amp; Owen 1980)"
             + ("; with non-detects all of them come from the censored maximum-likelihood fit and are "
                "approximate" if detection_limit is not None else "") + ".</p>",
             "</section>"]
    return "\n".join(parts)


def _components(acc: Any, by: Any, values: list[Hashable], nested: list[Hashable], confidence_level: float,
                nonpositive: str) -> str:
    """The variance-components section of a nested design."""
    res = acc.variance_components(by=by, columns=values, nested=nested, confidence_level=confidence_level,
                                  nonpositive=nonpositive)
    res = _rows_of(res)
    levels = [*map(str, nested), "within"]
    cols = ["n"] + [f"n_{lv}" for lv in levels[:-1]]
    for lv in levels:
        cols += [f"gsd_{lv}", f"frac_{lv}"]
    cols += ["design_effect", "n_effective"]
    var_cols = [c for lv in levels for c in (f"var_{lv}", f"var_{lv}_ci_low", f"var_{lv}_ci_high")]
    trunc = int(pd.to_numeric(res.get("n_truncated", pd.Series(dtype=float)), errors="coerce")
                .fillna(0).sum())
    nest_text = " within ".join(f"<code>{_e(x)}</code>" for x in nested[::-1])
    parts = ['<section id="variance-components"><h2>Where the spread is: variance components</h2>',
             f"<p>The variance of the natural logs split by level ({nest_text}; <i>within</i> is the "
             "spread inside the innermost unit). <code>gsd_L</code> = exp(\u221avar<sub>L</sub>) is that "
             "level\u2019s \u00d7/\u00f7 spread and <code>frac_L</code> its share of the total; "
             "<code>n_effective</code> = n / <code>design_effect</code> is the number of independent values "
             "the data are worth.</p>",
             _table(res, columns=cols),
             f"<h3>Components with their {100 * confidence_level:g}\u00a0% intervals (log scale)</h3>",
             _table(res, columns=var_cols),
             "<p>ANOVA (method-of-moments) estimators for the unbalanced nested classification (Searle, "
             "Casella &amp; McCulloch 1992); intervals: exact chi-squared for <i>within</i>, modified "
             "large-sample for the levels. An inner label is read within its outer level.</p>"]
    if trunc:
        parts.append(f'<p class="muted">{trunc} negative estimate(s) were set to 0 (counted in '
                     "<code>n_truncated</code>): that level shows no spread beyond what the level below "
                     "explains.</p>")
    parts.append('<p class="muted">To plan the next experiment from these components: <code>logstats plan '
                 "--ratio 1.5 --var-between VAR --var-within VAR</code> (or <code>logstats.plan</code>).</p>")
    parts.append("</section>")
    return "\n".join(parts)


def _methods(with_replicate: bool, with_censoring: bool, adjust: str | None, confidence_level: float, *,
             margin: float = 2.0, tails: bool = False, components: bool = False,
             censored_method: str = "mle") -> str:
    pct = f"{100 * confidence_level:g}\u00a0%"
    items = [
        "All statistics are computed on the natural logarithms y = ln x of the values; zeros and "
        "negatives have no logarithm and are refused, left out or made NaN as chosen (and always "
        "counted in the overview).",
        "Geometric mean GM = exp(\u0233), geometric standard deviation GSD = exp(s), with s the standard "
        "deviation of the logs with n\u22121 in the denominator (ddof = 1), and geometric coefficient "
        "of variation sqrt(exp(s\u00b2)\u22121) (Kirkwood 1979). A log-normal quantity is written "
        "GM \u00d7/\u00f7 GSD, which covers about 68\u00a0% of the population (Limpert, Stahel &amp; "
        "Abbt 2001).",
        f"The {pct} confidence interval of the geometric mean is exp(\u0233 \u00b1 "
        "t<sub>1\u2212\u03b1/2, n\u22121</sub>\u00b7s/\u221an).",
        "Fold changes are ratios of geometric means, exp(\u0233<sub>1</sub> \u2212 \u0233<sub>0</sub>), "
        "with interval and p-value from Welch\u2019s t test on the logs (Welch 1947)"
        + (", computed on the replicate means of the logs so that the replicate, not the cell, is the "
           "experimental unit (Lord et al. 2020)" if with_replicate else "")
        + "; p-values are adjusted for multiplicity "
        + {"holm": "by Holm\u2019s step-down method (Holm 1979)",
           "bh": "by the Benjamini\u2013Hochberg procedure (Benjamini &amp; Hochberg 1995)",
           None: "not at all"}.get(adjust, "as requested")
        + ". Equivalence, when asked for, uses two one-sided tests (Schuirmann 1987).",
        "The scale check compares the normal and the log-normal fitted by maximum likelihood to the "
        "same values through AIC = 2k \u2212 2\u00a0log\u00a0L (Akaike 1974), the log-normal likelihood "
        "taken on the original scale (with the Jacobian \u2212\u03a3\u00a0ln\u00a0x); it reports "
        "normality tests of x and of ln x (Shapiro\u2013Wilk up to 5000 values, Shapiro &amp; Wilk "
        "1965; D\u2019Agostino\u2013Pearson K\u00b2 above, D\u2019Agostino &amp; Pearson 1973) and the "
        "ratio of the arithmetic to the geometric mean beside exp(s\u00b2/2), the ratio a log-normal "
        "implies (NIST/SEMATECH e-Handbook). "
        f"A scale is preferred only when its AIC is lower by at least {margin:g}, else the verdict is "
        "undecided; the Box-Cox power is estimated by maximum likelihood with its profile-likelihood "
        "interval (Box &amp; Cox 1964), per group and, for several groups, with group means removed and one "
        "common power, beside the least-squares slope of log SD on log mean across the groups.",
    ]
    if tails:
        items.append("Upper-tail results use the log-normal fitted to each group: percentiles exp(\u0233 + "
                     "z<sub>q</sub>s) and exceedance fractions with exact intervals from the non-central t, "
                     "and one-sided tolerance limits with the exact non-central t factor (Odeh &amp; Owen "
                     "1980).")
    if components:
        items.append("Variance components of the logs come from ANOVA estimators for the unbalanced nested "
                     "classification, negative estimates set to zero (Searle, Casella &amp; McCulloch 1992).")
    if with_censoring:
        items.append(
            "Values at or below the detection limit are left-censored: the log-normal is fitted by "
            "maximum likelihood with the density for detected values and the distribution function at "
            "the limit for non-detects (Cohen 1961), rather than by substituting a value for them; the "
            "summary uses "
            + {"mle": "this fit", "ros": "robust regression on order statistics (Helsel 2012)",
               "km": "the Kaplan-Meier estimate on the flipped logs (Helsel 2012)"}.get(censored_method,
                                                                                  "the chosen method")
            + ", the scale check censored likelihoods on both scales, and the comparisons a censored "
            "regression on the logs with a common spread.")
    return ('<section id="methods"><h2>Methods</h2><p>' + " ".join(items) + "</p></section>")


def _cautions(tails: bool = False) -> str:
    return (
        '<section id="cautions"><h2>Cautions</h2>'
        "<p>This report is an automated statistical summary for research and exploration. It is not a "
        "validated tool and makes no claim of fitness for any particular decision.</p>"
        "<ul>"
        "<li>For clinical, regulatory or safety use, repeat the analysis with validated tools under a "
        "documented procedure and have it reviewed by a qualified statistician or analyst.</li>"
        "<li>Follow the local rules, guidelines and licensed practice that govern your field; they take "
        "precedence over anything stated here.</li>"
        "<li>Check the assumptions: the scale check and the probability plots show whether the logs "
        "are close to normal, and the comparisons assume independent experimental units.</li>"
        + (f"<li>{_e(_TAIL_CAUTION_HTML)}</li>" if tails else "")
        + "</ul></section>"
    )
