"""``report.html``: one self-contained page a group can decide from.

What it shows and where each number comes from:

* the funnel -- ``funnel.csv`` as written by the workflow (candidates in and
  out of each rule, per host);
* the band-alignment diagram -- CBM and VBM of the best-ranked candidates
  (Butler & Ginley, J. Electrochem. Soc. 125 (1978) 228, as computed by
  :mod:`screening.bands`) against H+/H2 and O2/H2O at the rule set's pH with
  the Nernstian shift of -0.0592 V per pH (common practice) and the rule set's
  overpotential margins; error bars where the shortlist carries
  ``cbm_sigma_v`` / ``vbm_sigma_v``;
* the STH limit against absorption onset -- the curve is
  :func:`screening.solar.sth_limit` (photon counting under ASTM G173-03
  AM1.5G, unit quantum yield), the points are the candidates;
* the scarcity chart -- raw-element cost per kg against the crustal abundance
  of the scarcest element (CRC Handbook via mendeleev, see
  :mod:`screening.scarcity`), with the rule set's ceilings;
* a sortable, filterable table of the best :data:`TABLE_ROWS` shortlisted
  candidates by rank (plain JavaScript written here); the page says how many of
  how many it shows, and ``shortlist.csv`` holds every row;
* the safety cautions, from the toxicity flags of :mod:`screening.scarcity`
  and the radioactivity flags of the candidates;
* the provenance record ``provenance.json`` when the results folder holds one.

The page needs no network: CSS and JavaScript are inline and every figure is
embedded as an SVG data URI.  Each figure is also written as PNG and SVG under
``figures_dir``.  Matplotlib runs on the Agg backend; SVG ids are salted and
the date left out so that the same results give the same bytes.

Size is bounded so that a 1,000-host screen (~70,000 shortlisted rows) costs
about what a 25-host one does: the table embeds at most :data:`TABLE_ROWS`
rows, the host grid at most :data:`FUNNEL_HOSTS` hosts, the STH zoom labels at
most :data:`STH_LABELS` onsets, and the scarcity cloud draws each distinct
(abundance, cost) point once, rasterised inside the SVG above
:data:`VECTOR_POINTS` points.  Constrained layout is solved once per figure
(for the PNG) and reused for the SVG, and log axes are labelled without
mathtext.  The two funnel figures, which read funnel.csv alone, are kept under
``figures_dir/.cache`` by content key, so a rerun after a change of ranking
weights copies them instead of drawing them.
"""
from __future__ import annotations

import base64
import hashlib
import html
import io
import json
import math
from pathlib import Path

import numpy as np
import pandas as pd

from screening.errors import ScreeningError

FIGURES = ("funnel", "funnel_hosts", "alignment", "sth", "scarcity")
"""Figure names; each is written as ``<name>.png`` and ``<name>.svg`` beside the report."""

TOP_ALIGNMENT = 12
"""Candidates drawn in the band-alignment diagram: enough to compare, few enough to read."""

TABLE_ROWS = 500
"""Most shortlist rows embedded in the page's table (the best by rank): a browser sorts and
filters 500 rows instantly, and the page stays a few hundred kB; shortlist.csv has all rows."""

FUNNEL_HOSTS = 40
"""Most hosts drawn in the host x rule grid (those keeping most candidates); the funnel
table below it lists every host."""

STH_LABELS = 30
"""Most onset groups labelled in the STH zoom (those holding the best ranks)."""

VECTOR_POINTS = 500
"""Scatter clouds with more distinct points than this are rasterised inside the SVG: one
image instead of one SVG element per point."""

PNG_DPI = 120
"""Resolution of the PNG figures: sharp on screen, and a third fewer pixels than 150 dpi."""

# The page's own palette: ink on warm paper, a slate-teal and a brick accent.
INK = "#1f2a30"
PAPER = "#fbf8f2"
MUTED = "#6b7479"
TEAL = "#2e6b73"
BRICK = "#b5482a"
SAND = "#e9dfcc"
RULE_COLOURS = ["#8a5a44", "#c07b3b", "#d8a94a", "#9aa35a", "#5f8f7b", "#3f7388", "#5a5c8f", "#8a5d86",
                "#a4505d"]

SHORTLIST_NEEDS = ["rank", "candidate_id", "host", "defects", "formula", "cbm_v_nhe", "vbm_v_nhe",
                   "her_margin_v", "oer_margin_v", "onset_ev", "sth_limit", "cost_usd_per_kg",
                   "scarcest_element", "score"]
RANKED_NEEDS = ["candidate_id", "rank", "score", "dopant_element", "codopant_element", "scarcest_abundance_ppm",
                "cost_usd_per_kg", "radioactive_elements", "toxic_elements"]
FUNNEL_NEEDS = ["host", "rule", "enumerated", "candidates_in", "candidates_out", "removed"]

# Table columns: (column, header, format). Formats are read by the page's script.
TABLE_COLUMNS = [
    ("rank", "Rank", "int"), ("candidate_id", "Candidate", "text"), ("host", "Host", "text"),
    ("defects", "Defects (Kröger–Vink)", "text"), ("formula", "Formula", "text"),
    ("cbm_v_nhe", "CBM / V", "f3"), ("cbm_sigma_v", "± CBM / V", "f3"),
    ("vbm_v_nhe", "VBM / V", "f3"), ("vbm_sigma_v", "± VBM / V", "f3"),
    ("her_margin_v", "HER margin / V", "f3"), ("oer_margin_v", "OER margin / V", "f3"),
    ("onset_ev", "Onset / eV", "f2"), ("sth_limit", "STH limit", "pct"),
    ("cost_usd_per_kg", "Cost / USD kg⁻¹", "g3"), ("hhi_production", "HHI prod.", "int"),
    ("scarcest_element", "Scarcest", "text"), ("critical_elements", "Critical", "text"),
    ("score", "Score", "f3"),
]


# --- inputs --------------------------------------------------------------------------------

def _read(path, reader, needs: list[str], what: str) -> pd.DataFrame:
    path = Path(path)
    if not path.is_file():
        raise ScreeningError(f"{what} not found (run the screen first)", source=str(path))
    frame = reader(path)
    missing = [c for c in needs if c not in frame.columns]
    if missing:
        raise ScreeningError(f"{what} lacks column(s) {', '.join(missing)}", source=str(path))
    return frame


def _read_parquet_columns(path: Path, columns: list[str]) -> pd.DataFrame:
    """The listed columns that the file has (the caller names any that are missing)."""
    import pyarrow.parquet as pq

    present = set(pq.read_schema(path).names)
    return pd.read_parquet(path, columns=[c for c in columns if c in present])


def _read_provenance(path) -> dict | None:
    if path is None or not Path(path).is_file():
        return None
    try:
        document = json.loads(Path(path).read_text(encoding="utf-8"))
    except json.JSONDecodeError as exc:
        raise ScreeningError(f"not valid JSON (line {exc.lineno}): {exc.msg}", source=str(path)) from None
    if not isinstance(document, dict):
        raise ScreeningError("provenance must be a JSON object", source=str(path))
    return document


def _check_alignment(alignment: dict) -> dict:
    out = {}
    for key, low, high in (("ph", 0.0, 14.0), ("her_overpotential_v", 0.0, 1.5), ("oer_overpotential_v", 0.0, 1.5)):
        value = alignment.get(key)
        if not isinstance(value, (int, float)) or not low <= float(value) <= high:
            raise ScreeningError(f"must be a number from {low:g} to {high:g}, got {value!r}",
                                 source="report alignment section", field=key)
        out[key] = float(value)
    out["mode"] = alignment.get("mode", "overall")
    return out


# --- figures -------------------------------------------------------------------------------

class _Figures:
    """Matplotlib without pyplot: the workflow may run this stage in a thread, and pyplot's global
    figure registry is not thread-safe; ``Figure`` objects with the Agg canvas are."""

    rc = {"svg.hashsalt": "screening-report", "svg.fonttype": "none", "font.size": 9,
          "axes.edgecolor": MUTED, "axes.labelcolor": INK, "xtick.color": INK, "ytick.color": INK,
          "axes.facecolor": "white", "figure.facecolor": "white", "axes.spines.top": False,
          "axes.spines.right": False, "axes.titleweight": "bold", "axes.titlesize": 10}

    def subplots(self, *args, figsize, **kwargs):
        import matplotlib

        matplotlib.rcParams.update(self.rc)
        from matplotlib.figure import Figure

        # constrained layout once, instead of bbox_inches="tight", which draws every figure twice
        fig = Figure(figsize=figsize, layout="constrained")
        return fig, fig.subplots(*args, **kwargs)


def _figures() -> _Figures:
    return _Figures()


def _save(fig, name: str, figures_dir: Path) -> str:
    """Write PNG and SVG; return the SVG as a data URI for the page."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig)
    figures_dir.mkdir(parents=True, exist_ok=True)
    fig.savefig(figures_dir / f"{name}.png", dpi=PNG_DPI, metadata={"Software": None})
    # Constrained layout works in figure fractions, so the solution found for the PNG holds for
    # the SVG too; freezing it saves a second layout pass (the costliest part of a draw).
    fig.set_layout_engine("none")
    buffer = io.BytesIO()
    # rasterised artists (large scatter clouds) are embedded in the SVG at this resolution
    fig.savefig(buffer, format="svg", dpi=PNG_DPI, metadata={"Date": None, "Creator": None})
    svg = buffer.getvalue()
    (figures_dir / f"{name}.svg").write_bytes(svg)
    return "data:image/svg+xml;base64," + base64.b64encode(svg).decode("ascii")


_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


def _log_label(value: float) -> str:
    exponent = round(math.log10(value))
    return f"{value:g}" if -2 <= exponent <= 3 else "10" + str(exponent).translate(_SUPERSCRIPT)


def _plain_log_axis(axis) -> None:
    """Label a log axis with plain text: matplotlib's default puts every label through mathtext,
    which was a tenth of the report's time.  Decades are labelled; minor ticks only when the
    view spans under two decades (otherwise a narrow axis would have no label at all).  Minor
    ticks sit at 2 and 5 only: eight per decade over eight decades was most of a figure's draw."""
    from matplotlib.ticker import Formatter, LogLocator

    class Decades(Formatter):
        def __init__(self, minor: bool):
            self.minor = minor

        def __call__(self, value, pos=None):
            if not value > 0 or not math.isfinite(value):
                return ""
            if self.minor:
                low, high = sorted(self.axis.get_view_interval())
                if low <= 0 or math.log10(high / low) >= 2:
                    return ""
                return f"{value:.2g}"
            return _log_label(value) if abs(math.log10(value) - round(math.log10(value))) < 1e-6 else ""

    axis.set_minor_locator(LogLocator(base=10, subs=(2.0, 5.0)))
    axis.set_major_formatter(Decades(False))
    axis.set_minor_formatter(Decades(True))


CACHE_DIR = ".cache"
"""Folder under ``figures_dir`` holding the funnel figures by content key (see :func:`_cached`)."""


def _funnel_key(name: str, funnel: pd.DataFrame) -> str:
    """Content key of a funnel figure: its name, funnel.csv's cells, the host limit, the rule
    order, this module's source and matplotlib's version -- everything the drawing reads."""
    import matplotlib

    from screening.pipeline import FUNNEL_ORDER

    digest = hashlib.sha256()
    for part in (name, FUNNEL_HOSTS, PNG_DPI, list(FUNNEL_ORDER), list(funnel.columns), matplotlib.__version__):
        digest.update(repr(part).encode("utf-8") + b"\0")
    digest.update(Path(__file__).read_bytes())
    digest.update(pd.util.hash_pandas_object(funnel, index=False).to_numpy().tobytes())
    return digest.hexdigest()[:24]


def _cached(name: str, key: str, draw, figures_dir: Path) -> str:
    """The figure ``name`` for content ``key``: copied from the cache when drawn before, else drawn.

    A change of ranking weights reruns the report but leaves funnel.csv as it was; the two
    funnel figures were a third of the stage's time.  Same inputs give the same bytes (SVG
    ids salted, no dates), so a cached figure is the figure a fresh draw would give.
    """
    from screening.files import atomic_write as _atomic

    cache = figures_dir / CACHE_DIR
    png, svg = cache / f"{name}-{key}.png", cache / f"{name}-{key}.svg"
    if not (png.is_file() and svg.is_file()):
        draw_dir = cache / f".{name}-{key}.new"
        _save(draw(), name, draw_dir)
        for old in cache.glob(f"{name}-*.*"):  # one entry per figure: the last drawn
            old.unlink(missing_ok=True)
        for ext, target in (("png", png), ("svg", svg)):
            (draw_dir / f"{name}.{ext}").replace(target)
        draw_dir.rmdir()
    figures_dir.mkdir(parents=True, exist_ok=True)
    for ext, source in (("png", png), ("svg", svg)):
        _atomic(figures_dir / f"{name}.{ext}", lambda tmp, source=source: Path(tmp).write_bytes(source.read_bytes()))
    return "data:image/svg+xml;base64," + base64.b64encode(svg.read_bytes()).decode("ascii")


def _rule_order(funnel: pd.DataFrame) -> list[str]:
    from screening.pipeline import FUNNEL_ORDER

    present = list(dict.fromkeys(funnel["rule"]))
    return [r for r in FUNNEL_ORDER if r in present] + [r for r in present if r not in FUNNEL_ORDER]


def funnel_summary(funnel: pd.DataFrame) -> pd.DataFrame:
    """Whole-screen funnel: candidates left after each rule, summed over hosts."""
    rules = _rule_order(funnel)
    enumerated = int(funnel.groupby("host")["enumerated"].max().sum())
    by_rule = funnel.groupby("rule")[["removed", "candidates_out"]].sum()
    rows = [{"step": "enumerated", "left": enumerated, "removed": 0}]
    rows += [{"step": r, "left": int(by_rule.loc[r, "candidates_out"]), "removed": int(by_rule.loc[r, "removed"])}
             for r in rules]
    return pd.DataFrame(rows)


def figure_funnel(funnel: pd.DataFrame):
    figs = _figures()
    summary = funnel_summary(funnel)
    fig, ax = figs.subplots(figsize=(7.2, 0.42 * len(summary) + 1.0))
    y = np.arange(len(summary))[::-1]
    colours = [SAND] + [RULE_COLOURS[i % len(RULE_COLOURS)] for i in range(len(summary) - 1)]
    left = np.fmax(summary["left"].to_numpy(float), 0.8)  # log axis: an empty step still shows
    ax.barh(y, left, color=colours, edgecolor=INK, linewidth=0.4, height=0.7)
    ax.set_xscale("log")
    _plain_log_axis(ax.xaxis)
    ax.set_yticks(y, summary["step"].str.replace("_", " "))
    for yi, (_, row) in zip(y, summary.iterrows()):
        text = f"{row['left']:,} left" + (f"   (−{row['removed']:,})" if row["removed"] else "")
        ax.text(left[list(y).index(yi)] * 1.15, yi, text, va="center", fontsize=8, color=INK, in_layout=False)
    ax.set_xlim(0.8, summary["left"].max() * 40)
    ax.set_xlabel("candidates left after the rule (log scale; all hosts)")
    ax.set_title("How the screen narrowed")
    return fig


def funnel_hosts_shown(funnel: pd.DataFrame, limit: int = FUNNEL_HOSTS) -> list[str]:
    """Hosts drawn in the host x rule grid: all of them up to ``limit``, else the ``limit`` that
    keep most candidates (ties by name), in name order."""
    rules = _rule_order(funnel)
    kept = funnel[funnel["rule"] == rules[-1]].groupby("host")["candidates_out"].sum()
    kept = kept.reindex(sorted(funnel["host"].unique()), fill_value=0)
    if len(kept) <= limit:
        return list(kept.index)
    best = kept.reset_index().sort_values(["candidates_out", "host"], ascending=[False, True], kind="stable")
    return sorted(best["host"].head(limit))


def figure_funnel_hosts(funnel: pd.DataFrame, limit: int = FUNNEL_HOSTS):
    figs = _figures()
    from matplotlib.colors import LinearSegmentedColormap, LogNorm

    rules = _rule_order(funnel)
    n_hosts = funnel["host"].nunique()
    # A 1,000-host grid would be a 300-inch figure with 10,000 labels (gigabytes of pixels).
    shown_hosts = funnel_hosts_shown(funnel, limit)
    matrix = funnel.pivot_table(index="host", columns="rule", values="removed", aggfunc="sum").reindex(
        index=shown_hosts, columns=rules)
    kept = funnel[funnel["rule"] == rules[-1]].groupby("host")["candidates_out"].sum().reindex(matrix.index,
                                                                                                fill_value=0)
    hosts = list(matrix.index)
    values = matrix.to_numpy(float)
    cmap = LinearSegmentedColormap.from_list("screening_removed", ["#f4efe4", "#d9a66b", "#9c4a2c", "#4a1f14"]).with_extremes(bad="white")
    shown = np.where(values > 0, values, np.nan)
    fig, ax = figs.subplots(figsize=(1.0 * (len(rules) + 1) + 2.2, 0.3 * len(hosts) + 1.6))
    vmax = max(np.nanmax(shown) if np.isfinite(shown).any() else 1.0, 1.0)
    image = ax.imshow(shown, aspect="auto", cmap=cmap, norm=LogNorm(vmin=1, vmax=max(vmax, 10)))
    for i in range(len(hosts)):
        for j in range(len(rules)):
            v = values[i, j]
            colour = "white" if v > 0 and math.log10(v) > 0.6 * math.log10(max(vmax, 10)) else INK
            # cell labels lie inside the axes: leaving them out of constrained layout halves its work
            if v > 0:  # a blank (white) cell: the rule removed nothing there; one text fewer to draw
                ax.text(j, i, f"{int(v):,}", ha="center", va="center", fontsize=6.5, color=colour, in_layout=False)
        ax.text(len(rules), i, f"{int(kept.iloc[i]):,}", ha="center", va="center", fontsize=7, color=TEAL,
                fontweight="bold", in_layout=False)
    ax.set_xlim(-0.5, len(rules) + 0.5)
    ax.set_xticks(range(len(rules) + 1), [r.replace("_", "\n") for r in rules] + ["kept"], fontsize=7)
    ax.set_yticks(range(len(hosts)), hosts, fontsize=7)
    ax.tick_params(axis="x", top=True, labeltop=True, bottom=False, labelbottom=False)
    ax.spines[:].set_visible(False)
    bar = fig.colorbar(image, ax=ax, fraction=0.03, pad=0.02, label="candidates removed")
    _plain_log_axis(bar.ax.yaxis)
    ax.set_title("Removed by each rule, per host" if len(hosts) == n_hosts else
                 f"Removed by each rule: the {len(hosts)} of {n_hosts:,} hosts keeping most", pad=28)
    return fig


def figure_alignment(shortlist: pd.DataFrame, alignment: dict, top: int = TOP_ALIGNMENT):
    figs = _figures()
    from screening import bands

    best = shortlist.sort_values("rank").head(top)
    hydrogen, oxygen = bands.water_levels(alignment["ph"])
    her_line = hydrogen - alignment["her_overpotential_v"]
    oer_line = oxygen + alignment["oer_overpotential_v"]
    fig, ax = figs.subplots(figsize=(max(6.0, 0.55 * len(best) + 4.0), 4.8))
    x = np.arange(len(best))
    cbm = best["cbm_v_nhe"].to_numpy(float)
    vbm = best["vbm_v_nhe"].to_numpy(float)
    lo = min(np.min(cbm, initial=her_line), her_line) - 0.5
    hi = max(np.max(vbm, initial=oer_line), oer_line) + 0.5
    # Where an edge must lie: the CBM above (more negative than) H+/H2 - eta_HER, the VBM below O2/H2O + eta_OER.
    ax.axhspan(lo, her_line, color="#dcebea", zorder=0)
    ax.axhspan(oer_line, hi, color="#f3e1d6", zorder=0)
    # Labels sit in a margin right of the bars; each pair of lines is labelled outward so they never overlap.
    label_x = len(best) - 0.25
    for level, style, label, colour, where in (
            (hydrogen, "-", f"H⁺/H₂ {hydrogen:+.3f} V", TEAL, "top"),
            (oxygen, "-", f"O₂/H₂O {oxygen:+.3f} V", BRICK, "bottom"),
            (her_line, "--", f"H⁺/H₂ − η(HER) {alignment['her_overpotential_v']:g} V", TEAL, "bottom"),
            (oer_line, "--", f"O₂/H₂O + η(OER) {alignment['oer_overpotential_v']:g} V", BRICK, "top")):
        ax.axhline(level, ls=style, lw=1.0, color=colour, zorder=1)
        ax.text(label_x, level, label, va=where, ha="left", fontsize=7, color=colour)
    ax.bar(x, vbm - cbm, bottom=cbm, width=0.55, color="#cfd6da", edgecolor=INK, linewidth=0.5, zorder=2,
           label="gap (CBM to VBM)")
    ax.hlines(cbm, x - 0.3, x + 0.3, color=TEAL, lw=2.2, zorder=3, label="CBM")
    ax.hlines(vbm, x - 0.3, x + 0.3, color=BRICK, lw=2.2, zorder=3, label="VBM")
    sigma_note = "no uncertainty given"
    if {"cbm_sigma_v", "vbm_sigma_v"} <= set(best.columns):
        cs = best["cbm_sigma_v"].to_numpy(float)
        vs = best["vbm_sigma_v"].to_numpy(float)
        ax.errorbar(x, cbm, yerr=np.nan_to_num(cs), fmt="none", ecolor=INK, elinewidth=0.9, capsize=3, zorder=4)
        ax.errorbar(x, vbm, yerr=np.nan_to_num(vs), fmt="none", ecolor=INK, elinewidth=0.9, capsize=3, zorder=4)
        sigma_note = "bars ±1σ"
    ax.set_ylim(hi, lo)  # more negative potential (higher electron energy) at the top
    ax.set_xlim(-0.6, len(best) + 2.6)
    ax.set_xticks(x, [f"#{r}  {c}" for r, c in zip(best["rank"], best["candidate_id"])], rotation=55,
                  ha="right", fontsize=7)
    ax.set_ylabel(f"potential / V vs NHE at pH {alignment['ph']:g}")
    vacuum = ax.secondary_yaxis("right", functions=(lambda v: -bands.FREE_ELECTRON_EV - v,
                                                    lambda e: -bands.FREE_ELECTRON_EV - e))
    vacuum.set_ylabel(f"energy / eV vs vacuum (E_e = {bands.FREE_ELECTRON_EV} eV)")
    ax.legend(loc="upper left", fontsize=7, frameon=False, ncol=3)
    ax.set_title(f"Band edges of the top {len(best)} against the water levels ({sigma_note})", loc="left")
    return fig


def figure_sth(shortlist: pd.DataFrame, labels: int = STH_LABELS):
    figs = _figures()
    from matplotlib.patches import Rectangle

    from screening import solar
    from screening.pipeline import STH_REFERENCE

    onsets = shortlist["onset_ev"].to_numpy(float)
    e_max = max(4.6, float(np.max(onsets, initial=0.0)) + 0.2)
    grid = np.linspace(1.0, e_max, 600)
    curve = 100 * np.asarray(solar.sth_limit(grid))
    # Candidates share onsets (first depth: the host gap), so points are grouped and sized by count.
    groups = shortlist.groupby("onset_ev").agg(n=("candidate_id", "size"), sth=("sth_limit", "first"),
                                               best=("rank", "min"), hosts=("host", lambda h: sorted(set(h))))
    gx = groups.index.to_numpy(float)
    gy = 100 * groups["sth"].to_numpy(float)
    # area grows with the square root of the count, scaled to the largest group, so a 70,000-row
    # screen draws bubbles no larger than a 2,000-row one (16 + 9 sqrt(n) for n up to ~350)
    counts = groups["n"].to_numpy(float)
    sizes = 16 + 9 * np.sqrt(counts * min(1.0, 350.0 / max(counts.max(initial=1.0), 1.0)))
    fig, (ax, zoom) = figs.subplots(1, 2, figsize=(10.5, 4.3), gridspec_kw={"width_ratios": [1, 1.25]})
    visible_edge = 1239.84 / 400  # 400 nm, the usual UV/visible boundary (common practice)
    for a in (ax, zoom):
        a.plot(grid, curve, color=INK, lw=1.4, zorder=2)
        a.scatter(gx, gy, s=sizes, color=BRICK, edgecolor=INK, linewidth=0.5, alpha=0.85, zorder=3)
        a.axvline(visible_edge, color=TEAL, ls=":", lw=1)
        a.set_xlabel("absorption onset / eV")
    ax.set_ylabel("STH limit / %")
    ax.axhline(100 * STH_REFERENCE, color=MUTED, ls="--", lw=0.8)
    ax.text(e_max - 0.05, 100 * STH_REFERENCE, f"{100 * STH_REFERENCE:.1f} % at 2.0 eV (the score's unit)",
            ha="right", va="bottom", fontsize=7, color=MUTED)
    ax.text(visible_edge - 0.05, curve.max() * 0.9, "visible  |  UV\n400 nm", ha="center", fontsize=7, color=TEAL)
    ax.set_xlim(1.0, e_max)
    ax.set_ylim(0, curve.max() * 1.05)
    ax.set_title("STH limit, AM1.5G, unit quantum yield", loc="left")
    if len(groups):
        x0, x1 = max(1.0, gx.min() - 0.25), min(e_max, gx.max() + 0.35)
        y1 = max(float(gy.max()) * 2.6, 0.5)  # head room for the vertical labels
    else:
        x0, x1, y1 = 2.5, e_max, 2.0
    ax.add_patch(Rectangle((x0, 0), x1 - x0, y1, fill=False, ec=BRICK, lw=0.8, ls="--"))
    zoom.set_xlim(x0, x1)
    zoom.set_ylim(-0.04 * y1, y1)
    # A big screen has hundreds of distinct onsets: only the groups holding the best ranks are
    # labelled (every group is still drawn), so the labels stay legible and few.
    labelled = groups.index.isin(groups.nsmallest(labels, "best").index) if labels > 0 else np.zeros(len(groups), bool)
    note = "" if labelled.all() else f"; labelled: the {int(labelled.sum())} of {len(groups)} onsets with the best ranks"
    zoom.set_title(f"zoom: the shortlist (label: host · candidates · best rank{note})", loc="left", fontsize=9)
    lab = groups[labelled]
    lgx, lgy = gx[labelled], gy[labelled]
    # Vertical labels, pushed apart to a minimum spacing (neighbouring onsets can be 0.01 eV apart)
    # and tied to their points by leader lines; all start at one height above the tallest point.
    gap = (x1 - x0) / 52
    label_x = np.array(lgx, dtype=float)
    for i in range(1, len(label_x)):
        label_x[i] = max(label_x[i], label_x[i - 1] + gap)
    if len(label_x):
        label_x -= max(0.0, (label_x[-1] - lgx[-1]) / 2)
    base = float(gy.max()) * 1.08 + 0.02 * y1 if len(gy) else 0
    # Leader lines as one LineCollection and labels as plain text: an annotation arrow per label
    # cost more than the rest of the figure (each arrow is clipped against its text's box).
    from matplotlib.collections import LineCollection

    lift = 0.02 * y1  # the line stops just above its point
    zoom.add_collection(LineCollection([[(ox, py + lift), (lx, base)] for ox, lx, py in zip(lgx, label_x, lgy)],
                                       colors=MUTED, linewidths=0.4, zorder=2.5))
    for (onset, row), lx in zip(lab.iterrows(), label_x):
        names = row["hosts"]
        label = ", ".join(names[:2]) + (f" +{len(names) - 2}" if len(names) > 2 else "")
        zoom.text(lx, base, f"{label} · {row['n']} · #{row['best']}", fontsize=6, color=INK, ha="center",
                  va="bottom", rotation=90)
    nm = zoom.secondary_xaxis("top", functions=(lambda e: 1239.84 / np.maximum(e, 1e-3),
                                                lambda w: 1239.84 / np.maximum(w, 1e-3)))
    nm.set_xlabel("onset wavelength / nm", fontsize=8)
    return fig


def figure_scarcity(ranked: pd.DataFrame, scarcity: dict | None):
    figs = _figures()
    from matplotlib.colors import LinearSegmentedColormap

    frame = ranked.sort_values("rank") if "rank" in ranked else ranked
    # Many compositions share (abundance, cost): each distinct point is drawn once, in the colour
    # of its best score, best drawn last (on top) -- the picture all rows would give, in a
    # fraction of the elements. Above VECTOR_POINTS the cloud is one raster image in the SVG.
    keys = ["scarcest_abundance_ppm", "cost_usd_per_kg"]
    cloud = frame.drop_duplicates(keys, keep="first")  # frame is in rank order: first = best
    if "score" in cloud:
        cloud = cloud.sort_values("score", kind="stable")
    x = cloud["scarcest_abundance_ppm"].to_numpy(float)
    y = cloud["cost_usd_per_kg"].to_numpy(float)
    cmap = LinearSegmentedColormap.from_list("screening_score", ["#d9d2c3", "#7fa7a0", TEAL, "#17363b"])
    fig, ax = figs.subplots(figsize=(7.0, 4.4))
    points = ax.scatter(x, y, c=cloud["score"].to_numpy(float) if "score" in cloud else None, cmap=cmap, s=14,
                        edgecolor="none", alpha=0.8, zorder=2, rasterized=len(cloud) > VECTOR_POINTS)
    ax.set_xscale("log")
    ax.set_yscale("log")
    _plain_log_axis(ax.xaxis)
    _plain_log_axis(ax.yaxis)
    if "score" in frame:
        fig.colorbar(points, ax=ax, fraction=0.04, pad=0.02, label="score")
    best = frame.head(5)
    ax.scatter(best["scarcest_abundance_ppm"], best["cost_usd_per_kg"], s=60, facecolor="none", edgecolor=BRICK,
               linewidth=1.2, zorder=3)
    for i, (_, row) in enumerate(best.iterrows()):
        # stagger the rank labels: the best candidates often share a host and sit on top of each other
        ax.annotate(f"#{row['rank']}", (row["scarcest_abundance_ppm"], row["cost_usd_per_kg"]),
                    xytext=(8 + 16 * i, 10 + 6 * i), textcoords="offset points", fontsize=7, color=BRICK,
                    fontweight="bold", arrowprops={"arrowstyle": "-", "color": BRICK, "lw": 0.5})
    if len(best):
        import textwrap

        ringed = "ringed:  " + "   ".join(f"#{r} {c}" for r, c in zip(best["rank"], best["candidate_id"]))
        # below the x label, wrapped to the figure's width so constrained layout keeps room for the axes
        ax.annotate(textwrap.fill(ringed, 95), xy=(0, 0), xycoords="axes fraction", xytext=(0, -30),
                    textcoords="offset points", fontsize=6.5, color=BRICK, va="top")
    scarcity = scarcity or {}
    low, high = ax.get_ylim()
    if scarcity.get("max_cost_usd_per_kg") is not None:
        ceiling = float(scarcity["max_cost_usd_per_kg"])
        ax.set_ylim(low, max(high, ceiling * 3))
        ax.axhline(ceiling, color=BRICK, ls="--", lw=0.9)
        ax.text(ax.get_xlim()[1], ceiling * 1.1, f"cost ceiling {ceiling:g} USD/kg", ha="right", va="bottom",
                fontsize=7, color=BRICK)
    if scarcity.get("min_crust_ppm") is not None:
        floor = float(scarcity["min_crust_ppm"])
        left, right = ax.get_xlim()
        ax.set_xlim(min(left, floor / 3), right)
        ax.axvline(floor, color=BRICK, ls="--", lw=0.9)
        ax.text(floor * 1.15, ax.get_ylim()[1], f"abundance floor {floor:g} ppm", rotation=90, va="top",
                fontsize=7, color=BRICK)
    ax.set_xlabel("crustal abundance of the scarcest element / ppm (CRC Handbook via mendeleev)")
    ax.set_ylabel("raw-element cost / USD per kg")
    ax.set_title("Cost and scarcity of every shortlisted composition"
                 + (f" ({len(cloud):,} distinct points)" if len(cloud) < len(frame) else ""))
    return fig


# --- page sections -------------------------------------------------------------------------

def _e(value) -> str:
    return html.escape(str(value), quote=True)


def _check_table_rows(value) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or not 1 <= int(value) <= 100_000:
        raise ScreeningError(f"must be a whole number from 1 to 100000, got {value!r}",
                             source="report table", field="table_rows")
    return int(value)


def table_rows(shortlist: pd.DataFrame, limit: int = TABLE_ROWS) -> pd.DataFrame:
    """The rows the page's table embeds: the best ``limit`` by rank, in rank order."""
    return shortlist.sort_values("rank", kind="stable").head(_check_table_rows(limit))


def _json_column(values: pd.Series, fmt: str) -> np.ndarray:
    """One table column as an object array of JSON-ready cells (None for a missing value)."""
    out = np.full(len(values), None, dtype=object)
    if fmt == "text":
        present = values.notna().to_numpy()
        out[present] = values[present].astype(str).to_numpy()
        return out
    numbers = pd.to_numeric(values, errors="coerce").to_numpy(float)
    finite = np.isfinite(numbers)
    cells = np.rint(numbers[finite]).astype(np.int64) if fmt == "int" else numbers[finite]
    out[finite] = cells.tolist()  # Python int/float, which json writes exactly
    return out


def _table_payload(shortlist: pd.DataFrame) -> tuple[str, list[tuple[str, str, str]]]:
    """JSON for the page's script: column specs and the rows of ``shortlist`` (already bounded),
    built column by column rather than cell by cell."""
    columns = [c for c in TABLE_COLUMNS if c[0] in shortlist.columns]
    if len(shortlist) and columns:
        rows = np.column_stack([_json_column(shortlist[k], fmt) for k, _, fmt in columns]).tolist()
    else:
        rows = []
    payload = {"columns": [{"key": k, "label": label, "fmt": fmt} for k, label, fmt in columns], "rows": rows}
    # "</" would end the script element early; JSON allows the escaped solidus.
    return json.dumps(payload, ensure_ascii=False, allow_nan=False).replace("</", "<\\/"), columns


def _table_notice(shown: int, total: int) -> str:
    if shown < total:
        return (f"<p class='warn' id='table-bound'>Showing the best {shown:,} of {total:,} shortlisted candidates "
                f"(by rank); sorting and filtering act on these {shown:,}. <code>shortlist.csv</code> holds all "
                f"{total:,}.</p>")
    return (f"<p class='muted' id='table-bound'>Showing all {total:,} shortlisted candidates "
            "(also in <code>shortlist.csv</code>).</p>")


def _safety_section(ranked: pd.DataFrame, rejected: pd.DataFrame, scarcity: dict | None) -> str:
    from screening import scarcity as scarcity_data

    toxicity = scarcity_data.toxicity_table()
    dopants = pd.concat([ranked["dopant_element"], ranked["codopant_element"]]).replace("", np.nan).dropna()
    counts = dopants.value_counts()
    flagged = [(s, int(counts[s]), toxicity.loc[s, "caution"], toxicity.loc[s, "basis"])
               for s in sorted(counts.index) if s in toxicity.index]
    host_toxic = sorted({s for text in ranked["toxic_elements"].dropna().unique() for s in str(text).split(";") if s}
                        - set(counts.index))
    radioactive = sorted({s for text in ranked["radioactive_elements"].dropna().unique()
                          for s in str(text).split(";") if s})
    removed_radioactive = sorted(set(rejected.loc[rejected["rule"] == "radioactive", "dopant"]))
    items = []
    if flagged:
        rows = "".join(f"<tr><th>{_e(s)}</th><td>{n}</td><td>{_e(c)}</td><td class='muted'>{_e(b)}</td></tr>"
                       for s, n, c, b in flagged)
        items.append("<p>Dopant or codopant elements of the shortlist with a hazard flag:</p>"
                     "<table class='plain'><thead><tr><th>element</th><th>candidates</th><th>caution</th>"
                     f"<th>basis</th></tr></thead><tbody>{rows}</tbody></table>")
    else:
        items.append("<p>No dopant or codopant of the shortlist carries a toxicity flag in the shipped table "
                     "(an element without a flag is not thereby safe).</p>")
    if host_toxic:
        items.append(f"<p>Host elements with a hazard flag: {_e(', '.join(host_toxic))} (see <code>screening audit</code>).</p>")
    if radioactive:
        items.append(f"<p class='warn'>Radioactive elements in shortlisted compositions: {_e(', '.join(radioactive))}. "
                     "Handling them needs a licence and a radiation-protection plan.</p>")
    else:
        excluded = (scarcity or {}).get("exclude_radioactive")
        items.append("<p>No shortlisted composition contains a radioactive element"
                     + (f"; the rule set removed radioactive ions ({_e(', '.join(removed_radioactive))})."
                        if removed_radioactive else "." if excluded is None else
                        " (the rule set excludes them)." if excluded else "."))
    items.append(
        "<ul class='cautions'>"
        "<li><b>Hydrogen and oxygen together are explosive.</b> Overall water splitting evolves both gases into "
        "the same head space; the mixture ignites over a wide range of compositions. Reactors must be designed, "
        "vented and monitored for it, kept small, and never sealed without pressure relief.</li>"
        "<li><b>High-temperature synthesis.</b> Solid-state routes to doped oxides run at about 1000–1400 °C; "
        "furnaces, crucibles and quenching need the usual hot-work precautions, and some precursors (nitrates, "
        "carbonates, fluorides, chlorides) release toxic or corrosive gases on heating: use extraction.</li>"
        "<li><b>Fine oxide powders</b> are an inhalation hazard whatever their composition; weigh and grind "
        "in a ventilated enclosure.</li>"
        "<li>These flags are screening aids, not a risk assessment. Follow local regulations and your "
        "institution's safety practice, and read the supplier's safety data sheet of every precursor.</li>"
        "</ul>")
    return "\n".join(items)


def _flatten(document, prefix: str = ""):
    if isinstance(document, dict):
        for key in sorted(document):
            yield from _flatten(document[key], f"{prefix}.{key}" if prefix else str(key))
    elif isinstance(document, list) and all(not isinstance(v, (dict, list)) for v in document):
        yield prefix, ", ".join(map(str, document))
    elif isinstance(document, list):
        for i, value in enumerate(document):
            yield from _flatten(value, f"{prefix}[{i}]")
    else:
        yield prefix, "" if document is None else str(document)


def _provenance_section(provenance: dict | None, path) -> str:
    if provenance is None:
        where = _e(path) if path is not None else "provenance.json"
        return (f"<p class='warn'>No provenance record: {where} is absent from this results folder, so the rule-set "
                "hash, data-table and package versions and the command line of this screen were not recorded. "
                "Treat the results as unverified until the screen is rerun with a version that writes it.</p>")
    rows = []
    for key, value in _flatten(provenance):
        if "\n" in value or len(value) > 160:
            cell = f"<details><summary>{_e(value[:80].splitlines()[0] if value else '')}…</summary><pre>{_e(value)}</pre></details>"
        else:
            cell = _e(value)
        rows.append(f"<tr><th>{_e(key)}</th><td>{cell}</td></tr>")
    return f"<table class='plain prov'><tbody>{''.join(rows)}</tbody></table>"


def _funnel_table(funnel: pd.DataFrame) -> str:
    rules = _rule_order(funnel)
    matrix = funnel.pivot_table(index="host", columns="rule", values="removed", aggfunc="sum").reindex(columns=rules)
    kept = funnel[funnel["rule"] == rules[-1]].set_index("host")["candidates_out"]
    enumerated = funnel.groupby("host")["enumerated"].max()
    head = "".join(f"<th>{_e(r.replace('_', ' '))}</th>" for r in rules)
    values = matrix.fillna(0).to_numpy(float).astype(np.int64)
    enumerated = enumerated.reindex(matrix.index).to_numpy()
    kept = kept.groupby(level=0).sum().reindex(matrix.index, fill_value=0).to_numpy()
    # one row per host (1,000 at most in practice): a loop over hosts, not over candidates
    body = "".join(
        f"<tr><th>{_e(h)}</th><td>{int(n):,}</td>" + "".join(f"<td>{v:,}</td>" for v in row)
        + f"<td class='kept'>{int(k):,}</td></tr>" for h, n, row, k in zip(matrix.index, enumerated, values, kept))
    return (f"<table class='plain num' id='funnel-table'><thead><tr><th>host</th><th>enumerated</th>{head}"
            f"<th>kept</th></tr></thead><tbody>{body}</tbody></table>")


_CSS = """
:root{--ink:%(ink)s;--paper:%(paper)s;--muted:%(muted)s;--teal:%(teal)s;--brick:%(brick)s;--sand:%(sand)s}
*{box-sizing:border-box}
body{margin:0;background:var(--paper);color:var(--ink);font:14px/1.5 "Segoe UI",system-ui,-apple-system,sans-serif}
header{padding:28px 40px 18px;border-bottom:3px double var(--ink)}
header h1{margin:0 0 4px;font-size:24px;letter-spacing:.01em}
header p{margin:2px 0;color:var(--muted)}
nav{position:sticky;top:0;z-index:2;background:var(--ink);padding:6px 40px}
nav a{color:var(--paper);margin-right:18px;text-decoration:none;font-size:13px}
nav a:hover{text-decoration:underline}
main{padding:8px 40px 48px;max-width:1500px}
section{margin:26px 0;padding-top:6px}
section h2{font-size:17px;margin:0 0 8px;padding-left:10px;border-left:5px solid var(--brick)}
.facts{display:flex;flex-wrap:wrap;gap:12px;margin:16px 0 0}
.fact{background:white;border:1px solid var(--sand);border-radius:4px;padding:8px 14px;min-width:130px}
.fact b{display:block;font-size:20px;color:var(--teal)}
.fact span{font-size:12px;color:var(--muted)}
figure{margin:8px 0 16px;background:white;border:1px solid var(--sand);padding:10px;display:inline-block;max-width:100%%}
figure img{max-width:100%%;height:auto;display:block}
figcaption{font-size:12px;color:var(--muted);margin-top:6px;max-width:900px}
.grid2{display:flex;flex-wrap:wrap;gap:16px;align-items:flex-start}
table.plain{border-collapse:collapse;font-size:12px;background:white}
table.plain th,table.plain td{border:1px solid var(--sand);padding:3px 8px;text-align:left;vertical-align:top}
table.num td{text-align:right}
td.kept{font-weight:bold;color:var(--teal)}
.muted{color:var(--muted)}
.warn{background:#fbeee6;border-left:4px solid var(--brick);padding:6px 10px}
.cautions li{margin:4px 0}
.controls{display:flex;flex-wrap:wrap;gap:12px;align-items:center;margin:6px 0 8px}
.controls input,.controls select{font:inherit;padding:4px 8px;border:1px solid var(--muted);border-radius:3px;background:white}
.controls input{min-width:280px}
#row-count{color:var(--muted)}
.tablewrap{max-height:70vh;overflow:auto;border:1px solid var(--sand);background:white}
table#shortlist{border-collapse:separate;border-spacing:0;font-size:12px;width:100%%}
#shortlist th{position:sticky;top:0;background:var(--ink);color:var(--paper);padding:6px 8px;text-align:left;cursor:pointer;white-space:nowrap;user-select:none}
#shortlist th[aria-sort=ascending]::after{content:" ▲";color:#e7b38f}
#shortlist th[aria-sort=descending]::after{content:" ▼";color:#e7b38f}
#shortlist td{padding:3px 8px;border-bottom:1px solid #efe8da;white-space:nowrap}
#shortlist td.n{text-align:right;font-variant-numeric:tabular-nums}
#shortlist tbody tr:nth-child(even){background:#faf7f0}
#shortlist tbody tr:hover{background:#e6efee}
.neg{color:var(--brick)}
details pre{white-space:pre-wrap;max-width:900px;font-size:11px}
table.prov th{white-space:nowrap;font-weight:600}
footer{padding:12px 40px;color:var(--muted);font-size:12px;border-top:1px solid var(--sand)}
""" % {"ink": INK, "paper": PAPER, "muted": MUTED, "teal": TEAL, "brick": BRICK, "sand": SAND}

# Plain JavaScript: sort on header click, free-text and host filters; the URL hash
# (#sort=-score&q=Cr&host=SrTiO3) sets the same state, so a headless browser can check it.
_JS = r"""
(function () {
  "use strict";
  var data = JSON.parse(document.getElementById("shortlist-data").textContent);
  var table = document.getElementById("shortlist"), body = table.tBodies[0];
  var cols = data.columns, rows = data.rows, embedded = rows.length;
  var total = Number(table.getAttribute("data-rows-total")) || embedded;
  var search = document.getElementById("filter-text"), hostSel = document.getElementById("filter-host");
  var state = {sort: "rank", dir: 1, q: "", host: ""};
  function indexOf(key) { for (var i = 0; i < cols.length; i++) if (cols[i].key === key) return i; return -1; }
  function fmt(v, f) {
    if (v === null) return "";
    if (f === "int") return String(v);
    if (f === "f3") return v.toFixed(3);
    if (f === "f2") return v.toFixed(2);
    if (f === "pct") return (100 * v).toFixed(2) + " %";
    if (f === "g3") return Number(v.toPrecision(3)).toString();
    return String(v);
  }
  function readHash() {
    var h = window.location.hash.replace(/^#/, "");
    h.split("&").forEach(function (part) {
      var kv = part.split("="), k = decodeURIComponent(kv[0] || ""), v = decodeURIComponent(kv[1] || "");
      if (k === "sort" && v) {
        var desc = v.charAt(0) === "-", key = desc ? v.slice(1) : v;
        if (indexOf(key) >= 0) { state.sort = key; state.dir = desc ? -1 : 1; }
      } else if (k === "q") { state.q = v; } else if (k === "host") { state.host = v; }
    });
    search.value = state.q; hostSel.value = state.host;
  }
  function writeHash() {
    var parts = ["sort=" + (state.dir < 0 ? "-" : "") + state.sort];
    if (state.q) parts.push("q=" + encodeURIComponent(state.q));
    if (state.host) parts.push("host=" + encodeURIComponent(state.host));
    if (window.history && window.history.replaceState) window.history.replaceState(null, "", "#" + parts.join("&"));
  }
  function compare(i, dir) {
    return function (a, b) {
      var x = a[i], y = b[i];
      if (x === y) return a[0] - b[0];
      if (x === null) return 1;            // empty cells last, whichever the direction
      if (y === null) return -1;
      var c = (typeof x === "number") ? x - y : String(x).localeCompare(String(y));
      return c !== 0 ? dir * c : a[0] - b[0];
    };
  }
  function render() {
    var terms = state.q.toLowerCase().split(/\s+/).filter(Boolean), hostIdx = indexOf("host");
    var shown = rows.filter(function (r) {
      if (state.host && r[hostIdx] !== state.host) return false;
      if (!terms.length) return true;
      var line = r.join(" ").toLowerCase();
      return terms.every(function (t) { return line.indexOf(t) >= 0; });
    });
    shown.sort(compare(indexOf(state.sort), state.dir));
    var frag = document.createDocumentFragment();
    shown.forEach(function (r) {
      var tr = document.createElement("tr");
      tr.setAttribute("data-rank", r[0]);
      for (var i = 0; i < cols.length; i++) {
        var td = document.createElement("td"), f = cols[i].fmt;
        td.textContent = fmt(r[i], f);
        if (f !== "text") { td.className = "n"; if (r[i] !== null && r[i] < 0 && cols[i].key.indexOf("margin") >= 0) td.className += " neg"; }
        tr.appendChild(td);
      }
      frag.appendChild(tr);
    });
    body.innerHTML = "";
    body.appendChild(frag);
    table.setAttribute("data-rows-shown", String(shown.length));
    table.setAttribute("data-sorted-by", (state.dir < 0 ? "-" : "") + state.sort);
    document.getElementById("row-count").textContent = shown.length + " of " + embedded + " rows shown" +
      (embedded < total ? " (the best " + embedded + " of " + total.toLocaleString("en") + " by rank; shortlist.csv has all)" : "");
    var ths = table.tHead.rows[0].cells;
    for (var j = 0; j < ths.length; j++) {
      ths[j].setAttribute("aria-sort", cols[j].key === state.sort ? (state.dir > 0 ? "ascending" : "descending") : "none");
    }
  }
  var head = document.createElement("tr");
  cols.forEach(function (c) {
    var th = document.createElement("th");
    th.textContent = c.label; th.setAttribute("data-key", c.key); th.title = "sort by " + c.key;
    th.addEventListener("click", function () {
      if (state.sort === c.key) state.dir = -state.dir; else { state.sort = c.key; state.dir = 1; }
      writeHash(); render();
    });
    head.appendChild(th);
  });
  table.tHead.appendChild(head);
  var hosts = {}, hostIdx = indexOf("host");
  rows.forEach(function (r) { hosts[r[hostIdx]] = true; });
  Object.keys(hosts).sort().forEach(function (h) {
    var o = document.createElement("option"); o.value = h; o.textContent = h; hostSel.appendChild(o);
  });
  search.addEventListener("input", function () { state.q = search.value; writeHash(); render(); });
  hostSel.addEventListener("change", function () { state.host = hostSel.value; writeHash(); render(); });
  window.addEventListener("hashchange", function () { readHash(); render(); });
  readHash();
  render();
})();
"""


def _figure(uri: str, name: str, alt: str, caption: str) -> str:
    return (f"<figure id='fig-{name}'><img src='{uri}' alt='{_e(alt)}'>"
            f"<figcaption>{caption} <span class='muted'>(also figures/{name}.png, figures/{name}.svg)</span>"
            "</figcaption></figure>")


def write_report(results_dir, ranked_file, shortlist_file, rejected_file, funnel_file, provenance_file,
                 alignment: dict, out_html, figures_dir, *, scarcity: dict | None = None,
                 weights: dict | None = None, title: str | None = None, top: int = TOP_ALIGNMENT,
                 table_limit: int = TABLE_ROWS) -> Path:
    """Write ``out_html`` and the figures (PNG + SVG) under ``figures_dir``; returns the page's path.

    ``alignment`` is the rule set's alignment section (pH, overpotentials, mode);
    ``scarcity`` (optional) its scarcity section, for the ceilings drawn on the
    scarcity chart; ``weights`` the ranking weights, shown beside the table;
    ``table_limit`` the most rows the table embeds (the best by rank).
    ``provenance_file`` may be None or a path that does not exist: the page then
    says that the record is absent.
    """
    from screening.files import atomic_write as _atomic

    results_dir = Path(results_dir)
    alignment = _check_alignment(alignment)
    table_limit = _check_table_rows(table_limit)
    # Only the columns the page uses are read: on a 70,000-row screen the full tables were most
    # of the stage's memory.
    wanted = set(SHORTLIST_NEEDS) | {c[0] for c in TABLE_COLUMNS}
    shortlist = _read(shortlist_file, lambda p: pd.read_csv(p, keep_default_na=False, na_values=[""],
                                                            usecols=lambda c: c in wanted),
                      SHORTLIST_NEEDS, "shortlist")
    ranked = _read(ranked_file, lambda p: _read_parquet_columns(p, RANKED_NEEDS), RANKED_NEEDS, "ranked stage file")
    rejected_needs = ["host", "dopant", "rule", "scope"]
    rejected = _read(rejected_file, lambda p: _read_parquet_columns(p, rejected_needs), rejected_needs,
                     "rejected candidates")
    funnel = _read(funnel_file, lambda p: pd.read_csv(p, keep_default_na=False), FUNNEL_NEEDS, "funnel")
    if len(funnel) == 0:
        raise ScreeningError("funnel has no rows", source=str(funnel_file))
    provenance = _read_provenance(provenance_file)
    for text_column in ("critical_elements", "scarcest_element", "defects"):
        if text_column in shortlist:
            shortlist[text_column] = shortlist[text_column].fillna("")
    ranked = ranked[ranked["candidate_id"].isin(shortlist["candidate_id"])]
    name = title or results_dir.name
    figures_dir = Path(figures_dir)

    funnel_uri = _cached("funnel", _funnel_key("funnel", funnel), lambda: figure_funnel(funnel), figures_dir)
    hosts_uri = _cached("funnel_hosts", _funnel_key("funnel_hosts", funnel), lambda: figure_funnel_hosts(funnel),
                        figures_dir)
    alignment_uri = _save(figure_alignment(shortlist, alignment, top), "alignment", figures_dir)
    sth_uri = _save(figure_sth(shortlist), "sth", figures_dir)
    scarcity_uri = _save(figure_scarcity(ranked, scarcity), "scarcity", figures_dir)

    summary = funnel_summary(funnel)
    embedded = table_rows(shortlist, table_limit)
    payload, columns = _table_payload(embedded)
    n_hosts = funnel["host"].nunique()
    grid_hosts = len(funnel_hosts_shown(funnel))
    has_sigma = {"cbm_sigma_v", "vbm_sigma_v"} <= set(shortlist.columns)
    from screening import bands

    hydrogen, oxygen = bands.water_levels(alignment["ph"])
    weights_text = (", ".join(f"{k} {v:g}" for k, v in weights.items()) if weights else "see the rule set")
    facts = [(f"{int(summary['left'].iloc[0]):,}", "candidates enumerated"),
             (f"{len(shortlist):,}", "on the shortlist"), (f"{funnel['host'].nunique()}", "hosts"),
             (f"pH {alignment['ph']:g}", f"{alignment['mode']} water splitting"),
             (f"{int(rejected['scope'].eq('ion').sum()):,} / {int(rejected['scope'].eq('candidate').sum()):,}",
              "rejection records (ion / candidate)")]
    best = shortlist.sort_values("rank").head(1)
    lead = (f"Best-ranked: <b>{_e(best['candidate_id'].iloc[0])}</b> ({_e(best['formula'].iloc[0])}, "
            f"score {best['score'].iloc[0]:.3f})." if len(best) else "The shortlist is empty: every candidate was removed.")
    page = f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>Screen {_e(name)}: dopant shortlist</title>
<style>{_CSS}</style></head>
<body>
<header><h1>Screen “{_e(name)}”: which doped oxides to make</h1>
<p>Results folder {_e(results_dir)} · {lead}</p>
<div class="facts">{''.join(f"<div class='fact'><b>{_e(v)}</b><span>{_e(k)}</span></div>" for v, k in facts)}</div>
</header>
<nav><a href="#funnel">Funnel</a><a href="#alignment">Band alignment</a><a href="#sth">STH limit</a>
<a href="#scarcity">Scarcity</a><a href="#table">Shortlist</a><a href="#safety">Safety</a><a href="#provenance">Provenance</a></nav>
<main>
<section id="funnel"><h2>1. Funnel: what each rule removed</h2>
<div class="grid2">
{_figure(funnel_uri, "funnel", "bar chart of candidates left after each rule",
         "Candidates left after each rule, in the order the rules run, summed over hosts. Single-ion rules count the pairs a removed ion would have formed.")}
{_figure(hosts_uri, "funnel_hosts", "heat map of candidates removed per host and rule",
         "Candidates removed by each rule for each host (blank: none); the last column is what the host keeps on the shortlist."
         + ("" if grid_hosts == n_hosts else
            f" Drawn: the {grid_hosts} of {n_hosts:,} hosts keeping most candidates; the table below lists every host."))}
</div>
<details><summary>Funnel as a table</summary>{_funnel_table(funnel)}</details>
</section>
<section id="alignment"><h2>2. Band alignment of the top {min(top, len(shortlist))}</h2>
{_figure(alignment_uri, "alignment", "band edges of the best candidates against the water redox levels",
         f"Butler–Ginley CBM and VBM (V vs NHE at pH {alignment['ph']:g}); H⁺/H₂ at {hydrogen:+.3f} V and O₂/H₂O at {oxygen:+.3f} V. "
         "The tinted bands are where the edges must lie once the overpotential margins are added. "
         + ("Error bars: ±1σ from the band-edge stage." if has_sigma else "The band-edge stage gave no uncertainty, so no error bars are drawn."))}
</section>
<section id="sth"><h2>3. STH limit against absorption onset</h2>
{_figure(sth_uri, "sth", "STH limit curve with the candidates' onsets",
         "Curve: photon-counting STH limit under ASTM G173-03 AM1.5G (unit quantum yield, 1.23 V per electron). "
         "Points: the shortlisted candidates, grouped where they share an onset"
         + (f"; the {STH_LABELS} groups with the best ranks are labelled." if shortlist["onset_ev"].nunique() > STH_LABELS else "."))}
</section>
<section id="scarcity"><h2>4. Cost and scarcity</h2>
{_figure(scarcity_uri, "scarcity", "scatter of cost per kg against scarcest-element abundance",
         "Each point is a shortlisted composition (compositions sharing abundance and cost drawn once, in their best score's colour); "
         "colour is its score; dashed lines are the rule set's ceilings. The five best are labelled.")}
</section>
<section id="table"><h2>5. Shortlist</h2>
<p class="muted">Click a column head to sort (again to reverse). Filter by any text (all words must match) or by host. Score weights: {_e(weights_text)}. <code>screening explain RANK</code> prints every rule a candidate met and the numbers behind its score.</p>
<div class="controls"><input id="filter-text" type="search" placeholder="filter, e.g. Cr La SrTiO3" aria-label="filter the shortlist">
<select id="filter-host" aria-label="host"><option value="">all hosts</option></select>
<span id="row-count"></span></div>
{_table_notice(len(embedded), len(shortlist))}
<div class="tablewrap"><table id="shortlist" data-rows-total="{len(shortlist)}" data-rows-embedded="{len(embedded)}"><thead></thead><tbody id="shortlist-body"></tbody></table></div>
<noscript><p class="warn">The table needs JavaScript; its rows, and all the others, are in shortlist.csv.</p></noscript>
</section>
<section id="safety"><h2>6. Safety</h2>
{_safety_section(ranked, rejected, scarcity)}
</section>
<section id="provenance"><h2>7. Provenance</h2>
{_provenance_section(provenance, provenance_file)}
</section>
</main>
<footer>Written by screening's report stage from shortlist.csv, funnel.csv, rejected.parquet and stages/ranked.parquet. Potentials are estimates from electronegativity, not measurements.</footer>
<script type="application/json" id="shortlist-data">{payload}</script>
<script>{_JS}</script>
</body></html>
"""
    out_html = Path(out_html)
    _atomic(out_html, lambda tmp: Path(tmp).write_text(page, encoding="utf-8"))
    return out_html
