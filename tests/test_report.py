"""report.html: sections, self-containment, figures, bad input, and the table in a real browser.

The results folder is built by calling the workflow's stage functions directly
(the same functions the Snakefile's rules call), which takes seconds instead
of Snakemake's ~25 s; tests/test_progress.py runs the real workflow once.
"""
from __future__ import annotations

import hashlib
import json
import os
import re
import shutil
import subprocess
import xml.etree.ElementTree as ET
from pathlib import Path

import pandas as pd
import pytest

from screening import pipeline, provenance, report, rulesets
from screening.errors import ScreeningError

REPO = Path(__file__).resolve().parents[1]
DATA = Path(__file__).resolve().parent / "data"
ARTIFACTS = REPO / "test-artifacts"


def build_results(rules_path: Path, out: Path, *, with_provenance: bool = True) -> rulesets.RuleSet:
    """Run the stages of one screen in order, as the Snakefile does; returns the rule set."""
    rules = rulesets.load_ruleset(rules_path)
    s = rules.sections
    stages = out / "stages"
    hosts_json = stages / "hosts.json"
    pipeline.prepare_hosts(rules.hosts_path, s["workflow"]["shard_size"], hosts_json)
    n = pipeline.shard_count(len(pipeline.read_hosts(hosts_json)), s["workflow"]["shard_size"])
    kept, edges, rejected, funnels = [], [], [], []
    for shard in range(n):
        d = stages / f"shard_{shard}"
        pipeline.screen_shard(hosts_json, shard, rules.pool_path, rules.section("enumeration"),
                              rules.section("filters"), rules.section("scarcity"), d / "kept.parquet",
                              d / "rejected.parquet", d / "funnel.csv")
        pipeline.edge_shard(hosts_json, shard, d / "kept.parquet", rules.sections["filters"]["radius_mismatch"]["max_relative"],
                            d / "edges.parquet")
        kept.append(d / "kept.parquet")
        edges.append(d / "edges.parquet")
        rejected.append(d / "rejected.parquet")
        funnels.append(d / "funnel.csv")
    pipeline.rank(hosts_json, kept, edges, rules.section("alignment"), rules.section("ranking"),
                  s["filters"]["radius_mismatch"]["max_relative"], stages / "ranked.parquet",
                  stages / "alignment_rejected.parquet", stages / "alignment_funnel.csv")
    pipeline.assemble(stages / "ranked.parquet", rejected + [stages / "alignment_rejected.parquet"],
                      funnels + [stages / "alignment_funnel.csv"], out / "shortlist.csv", out / "rejected.parquet",
                      out / "funnel.csv")
    if with_provenance:
        provenance.write(rules, out / provenance.FILE_NAME)
    return rules


def write_page(rules, out: Path, **overrides) -> Path:
    args = dict(results_dir=out, ranked_file=out / "stages" / "ranked.parquet", shortlist_file=out / "shortlist.csv",
                rejected_file=out / "rejected.parquet", funnel_file=out / "funnel.csv",
                provenance_file=out / provenance.FILE_NAME, alignment=rules.section("alignment"),
                out_html=out / "report.html", figures_dir=out / "figures")
    args.update(overrides)
    return report.write_report(**args, scarcity=rules.section("scarcity"),
                               weights=rules.sections["ranking"]["weights"], title=rules.name)


@pytest.fixture(scope="module")
def screen(tmp_path_factory):
    base = tmp_path_factory.mktemp("report-screen")
    for name in ("small_rules.yaml", "small_hosts.yaml", "small_pool.yaml"):
        shutil.copy(DATA / name, base / name)
    out = base / "results"
    rules = build_results(base / "small_rules.yaml", out)
    page = write_page(rules, out)
    return rules, out, page


def test_page_is_self_contained_and_has_every_section(screen):
    rules, out, page = screen
    text = page.read_text(encoding="utf-8")
    # no network: nothing is fetched from a URL (links in text would be harmless, but there are none)
    assert not re.search(r"""(src|href)\s*=\s*["']?(https?:)?//""", text)
    assert "<link" not in text and "@import" not in text
    for anchor in ("funnel", "alignment", "sth", "scarcity", "table", "safety", "provenance"):
        assert f'<section id="{anchor}">' in text
    # figures embedded as SVG data URIs and written beside the page as PNG and SVG
    assert text.count("data:image/svg+xml;base64,") == len(report.FIGURES)
    for name in report.FIGURES:
        assert (out / "figures" / f"{name}.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        root = ET.parse(out / "figures" / f"{name}.svg").getroot()
        assert root.tag.endswith("svg")


def test_water_levels_at_the_rule_sets_ph(screen):
    rules, out, page = screen
    text = page.read_text(encoding="utf-8")
    ph = rules.sections["alignment"]["ph"]
    # H+/H2 0 V and O2/H2O 1.229 V vs NHE at pH 0, -0.0592 V per pH (Nernst at 25 °C; common practice)
    assert ph == 7.0
    assert "H⁺/H₂ at -0.414 V" in text
    assert "O₂/H₂O at +0.815 V" in text


def test_funnel_table_matches_funnel_csv(screen):
    _, out, page = screen
    funnel = pd.read_csv(out / "funnel.csv", keep_default_na=False)
    table = re.search(r"<table class='plain num' id='funnel-table'>.*?</table>", page.read_text(), re.S).group(0)
    rows = re.findall(r"<tr><th>([^<]+)</th>((?:<td[^>]*>[^<]*</td>)+)</tr>", table)
    assert sorted(h for h, _ in rows) == sorted(funnel["host"].unique())
    for host, cells in rows:
        numbers = [int(c.replace(",", "")) for c in re.findall(r">([\d,]+)<", cells)]
        part = funnel[funnel["host"] == host]
        # enumerated - sum(removed) = kept: every candidate is removed once or kept
        assert numbers[0] == part["enumerated"].iloc[0]
        assert numbers[0] - sum(numbers[1:-1]) == numbers[-1]


def test_provenance_shown_with_the_rule_set_hash(screen):
    rules, out, page = screen
    text = page.read_text(encoding="utf-8")
    digest = hashlib.sha256((out.parent / "small_rules.yaml").read_bytes()).hexdigest()  # hashlib, independent
    assert f"<th>ruleset.sha256</th><td>{digest}</td>" in text


def test_absent_provenance_is_said(tmp_path):
    text = report._provenance_section(report._read_provenance(tmp_path / "provenance.json"),
                                      tmp_path / "provenance.json")
    assert "No provenance record" in text and "provenance.json is absent" in text


def test_safety_cautions(screen):
    _, out, page = screen
    text = page.read_text(encoding="utf-8")
    assert "explosive" in text and "1000–1400 °C" in text and "local regulations" in text
    ranked = pd.read_parquet(out / "stages" / "ranked.parquet")
    if ranked["dopant_element"].eq("Cr").any():
        # chromium(VI) compounds are carcinogens (CLP Annex VI, Carc. 1A/1B; common practice): Cr must be flagged
        assert "<tr><th>Cr</th>" in text


def test_uncertainty_bars_only_when_the_shortlist_has_sigmas(screen, tmp_path):
    rules, out, _ = screen
    shortlist = pd.read_csv(out / "shortlist.csv")
    plain = shortlist.drop(columns=[c for c in ("cbm_sigma_v", "vbm_sigma_v") if c in shortlist])
    sigma = plain.assign(cbm_sigma_v=0.2, vbm_sigma_v=0.25)
    alignment = report._check_alignment(rules.section("alignment"))
    paths = {}
    for name, frame in (("plain", plain), ("sigma", sigma)):
        report._save(report.figure_alignment(frame, alignment), name, tmp_path)
        paths[name] = (tmp_path / f"{name}.svg").read_bytes().count(b"<path")
    # the error bars are extra path elements in the SVG
    assert paths["sigma"] > paths["plain"]
    assert '"key": "cbm_sigma_v"' in report._table_payload(sigma)[0]
    assert '"key": "cbm_sigma_v"' not in report._table_payload(plain)[0]


@pytest.mark.parametrize("missing", ["shortlist.csv", "funnel.csv"])
def test_missing_input_is_a_screening_error(screen, tmp_path, missing):
    rules, out, _ = screen
    key = {"shortlist.csv": "shortlist_file", "funnel.csv": "funnel_file"}[missing]
    with pytest.raises(ScreeningError, match="not found"):
        write_page(rules, out, **{key: tmp_path / missing}, out_html=tmp_path / "r.html")
    assert not (tmp_path / "r.html").exists()


def test_missing_column_and_bad_ph_are_named(screen, tmp_path):
    rules, out, _ = screen
    pd.read_csv(out / "shortlist.csv").drop(columns=["onset_ev"]).to_csv(tmp_path / "s.csv", index=False)
    with pytest.raises(ScreeningError, match="onset_ev"):
        write_page(rules, out, shortlist_file=tmp_path / "s.csv", out_html=tmp_path / "r.html")
    bad = dict(rules.section("alignment"), ph=15)
    with pytest.raises(ScreeningError, match="field 'ph'.*0 to 14"):
        write_page(rules, out, alignment=bad, out_html=tmp_path / "r.html")


# --- a large shortlist: the table is bounded -------------------------------------------------

def _payload(text: str) -> dict:
    match = re.search(r'<script type="application/json" id="shortlist-data">(.*?)</script>', text, re.S)
    assert match, "the table's data block is missing"
    return json.loads(match.group(1).replace("<\\/", "</"))


def synthetic_shortlist(real: pd.DataFrame, n: int) -> pd.DataFrame:
    """SYNTHETIC, for size only: ``n`` rows made by repeating the rows of a real shortlist, each
    copy's candidate_id suffixed ``~synthK`` (copy 0 keeps the real ids, so the ranked file still
    matches), then ranks 1..n dealt in reverse file order so that picking the best means sorting."""
    copies = -(-n // len(real))
    frames = [real.assign(candidate_id=real["candidate_id"] + (f"~synth{k}" if k else "")) for k in range(copies)]
    big = pd.concat(frames, ignore_index=True).head(n)
    big["rank"] = range(n, 0, -1)
    return big


def test_large_shortlist_embeds_a_bounded_table(screen, tmp_path):
    rules, out, _ = screen
    real = pd.read_csv(out / "shortlist.csv")
    big = synthetic_shortlist(real, 20_000)
    big.to_csv(tmp_path / "shortlist.csv", index=False)
    page = write_page(rules, out, shortlist_file=tmp_path / "shortlist.csv", out_html=tmp_path / "report.html",
                      figures_dir=tmp_path / "figures")
    text = page.read_text(encoding="utf-8")
    data = _payload(text)
    keys = [c["key"] for c in data["columns"]]
    limit = report.TABLE_ROWS
    assert 0 < limit < len(big)
    assert len(data["rows"]) == limit
    # pandas is the reference for "the best by rank": the limit smallest ranks, in rank order
    expected = big.nsmallest(limit, "rank")
    assert [r[keys.index("rank")] for r in data["rows"]] == expected["rank"].tolist()
    assert [r[keys.index("candidate_id")] for r in data["rows"]] == expected["candidate_id"].tolist()
    assert f"Showing the best {limit:,} of {len(big):,} shortlisted candidates" in text
    assert f"holds all {len(big):,}" in text
    assert f'data-rows-total="{len(big)}" data-rows-embedded="{limit}"' in text
    # the page does not grow with the shortlist: 20,000 rows would be several MB of JSON alone
    assert len(text.encode("utf-8")) < 1_500_000


def test_small_shortlist_is_shown_whole(screen):
    _, out, page = screen
    text = page.read_text(encoding="utf-8")
    n = len(pd.read_csv(out / "shortlist.csv"))
    assert n <= report.TABLE_ROWS
    assert len(_payload(text)["rows"]) == n
    assert f"Showing all {n:,} shortlisted candidates" in text


@pytest.mark.parametrize("bad", [0, -3, 2.5, True, "500", 100_001])
def test_table_limit_must_be_a_positive_whole_number(screen, tmp_path, bad):
    rules, out, _ = screen
    with pytest.raises(ScreeningError, match="field 'table_rows'.*1 to 100000"):
        write_page(rules, out, out_html=tmp_path / "r.html", table_limit=bad)
    assert not (tmp_path / "r.html").exists()


def test_cached_funnel_figure_is_the_figure_a_fresh_draw_gives(screen, tmp_path):
    _, out, _ = screen
    funnel = pd.read_csv(out / "funnel.csv", keep_default_na=False)
    figures = tmp_path / "figures"
    draws = []

    def draw(frame):
        draws.append(1)
        return report.figure_funnel(frame)

    key = report._funnel_key("funnel", funnel)
    first = report._cached("funnel", key, lambda: draw(funnel), figures)
    png = (figures / "funnel.png").read_bytes()
    again = report._cached("funnel", key, lambda: draw(funnel), figures)
    assert len(draws) == 1 and again == first  # second call: from the cache, not drawn
    shutil.rmtree(figures / report.CACHE_DIR)
    fresh = report._cached("funnel", key, lambda: draw(funnel), figures)
    assert len(draws) == 2
    assert fresh == first and (figures / "funnel.png").read_bytes() == png  # drawing is deterministic
    # a different funnel is a different key, drawn anew; the cache keeps one entry per figure
    fewer = funnel[funnel["host"] != funnel["host"].iloc[0]]
    other = report._cached("funnel", report._funnel_key("funnel", fewer), lambda: draw(fewer), figures)
    assert len(draws) == 3 and other != first
    assert len(list((figures / report.CACHE_DIR).glob("funnel-*.svg"))) == 1


# --- in a real browser ---------------------------------------------------------------------

def _chromium() -> str | None:
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


@pytest.fixture(scope="module")
def browser():
    path = _chromium()
    if path is None:
        if os.environ.get("CI") == "true":
            pytest.fail("CI=true but no chromium on PATH: .ci/run installs Debian's chromium package")
        pytest.skip("chromium not installed (apt-get install chromium): the browser test needs it")
    return path


def _headless(browser, tmp_path, *args) -> subprocess.CompletedProcess:
    command = [browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
               "--disable-component-update", "--disable-sync", "--no-first-run", "--disable-dev-shm-usage",
               f"--user-data-dir={tmp_path / 'chromium-profile'}", "--virtual-time-budget=5000", *args]
    result = subprocess.run(command, capture_output=True, text=True, timeout=120)
    assert result.returncode == 0, result.stderr[-2000:]
    return result


def _rows(dom: str) -> list[int]:
    body = re.search(r'<tbody id="shortlist-body">(.*?)</tbody>', dom, re.S)
    assert body, "the table body is missing from the rendered page"
    return [int(r) for r in re.findall(r'<tr data-rank="(\d+)">', body.group(1))]


def test_table_renders_and_sorts_in_chromium(browser, screen, tmp_path):
    _, out, page = screen
    shortlist = pd.read_csv(out / "shortlist.csv")
    url = page.resolve().as_uri()

    dom = _headless(browser, tmp_path, "--dump-dom", url).stdout
    ranks = _rows(dom)
    assert len(ranks) == min(len(shortlist), report.TABLE_ROWS) > 1
    assert ranks == sorted(ranks)  # opens in rank order

    dom = _headless(browser, tmp_path, "--dump-dom", url + "#sort=cost_usd_per_kg").stdout
    by_cost = _rows(dom)
    # pandas is the reference: stable sort by cost, ties in rank order (as the page breaks them)
    expected = shortlist.sort_values(["cost_usd_per_kg", "rank"], kind="stable")["rank"].tolist()
    assert by_cost == expected
    assert by_cost != ranks
    assert 'data-sorted-by="cost_usd_per_kg"' in dom

    host = shortlist["host"].iloc[0]
    dom = _headless(browser, tmp_path, "--dump-dom", url + f"#sort=-score&host={host}").stdout
    assert len(_rows(dom)) == int((shortlist["host"] == host).sum())

    ARTIFACTS.mkdir(exist_ok=True)
    shot = ARTIFACTS / "report.png"
    shot.unlink(missing_ok=True)
    _headless(browser, tmp_path, f"--screenshot={shot}", "--window-size=1400,3800", url + "#sort=-sth_limit")
    assert shot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_bounded_table_sorts_only_its_rows_in_chromium(browser, screen, tmp_path):
    """A page whose table holds fewer rows than the shortlist (limit 10 of the small screen's rows):
    the browser shows exactly the best 10 by rank, sorts within them, and says 10 of how many."""
    rules, out, _ = screen
    shortlist = pd.read_csv(out / "shortlist.csv")
    limit = 10
    assert len(shortlist) > limit
    page = write_page(rules, out, out_html=tmp_path / "bounded.html", figures_dir=tmp_path / "figures",
                      table_limit=limit)
    url = page.resolve().as_uri()
    best = shortlist.nsmallest(limit, "rank")
    dom = _headless(browser, tmp_path, "--dump-dom", url + "#sort=cost_usd_per_kg").stdout
    # pandas is the reference: the best 10 by rank, then a stable sort by cost with ties in rank order
    assert _rows(dom) == best.sort_values(["cost_usd_per_kg", "rank"], kind="stable")["rank"].tolist()
    count = re.search(r'<span id="row-count">([^<]*)</span>', dom).group(1)
    assert count.startswith(f"{limit} of {limit} rows shown") and f"of {len(shortlist)} by rank" in count
