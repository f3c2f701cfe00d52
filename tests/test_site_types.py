"""Single-ion rules per distinct site: the shard stage judges each ion once per site type and hands the
result to every host site of that type.  These checks hold the shortcut to the plain computations it
replaces: placements built host by host, and the per-candidate reference of ``benchmarks/`` (every
candidate record built, then every rule applied to it one at a time).  Internal consistency checks: the
outside checks of the rules themselves are in test_enumerate, test_scarcity and test_workflow.
"""
from __future__ import annotations

import dataclasses
import sys
from pathlib import Path

import pandas as pd
import pytest
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from screening import enumerate as enum
from screening import hosts as hostlib
from screening import pipeline, pools, rulesets

REPO = Path(__file__).resolve().parents[1]
LIBRARY = hostlib.load_hosts(REPO / "candidates" / "hosts.yaml")
POOL = pools.pool_ions(pools.load_pool(REPO / "candidates" / "pools" / "default.yaml"))


def test_titanates_share_one_b_site_type():
    # the premise: hosts of one family repeat their sites (Ti4+ in VI coordination, Shannon 0.605 Å)
    titanates = [h for h in LIBRARY if h.id in ("SrTiO3", "CaTiO3", "BaTiO3")]
    assert len(titanates) == 3
    types, members = enum.site_types(hostlib.sites_frame(titanates))
    b_sites = members[members["site_element"] == "Ti"]
    assert b_sites["site_type"].nunique() == 1
    assert len(types) == 4  # Sr, Ca, Ba on the A site; one Ti


def test_expanded_placements_equal_placements_built_host_by_host():
    sites = pd.concat([hostlib.sites_frame(LIBRARY), enum.anion_sites_frame(LIBRARY)], ignore_index=True)
    types, members = enum.site_types(sites)
    assert len(types) < len(sites)
    cation = types["site_charge"] > 0
    by_type = (pd.concat([enum.placements(types[cation], POOL), enum.anion_site_placements(types[~cation], ["N", "F"])],
                         ignore_index=True).sort_values(enum.PLACEMENT_KEY).reset_index(drop=True))
    expanded = enum.expand_to_hosts(by_type, members)
    direct = (pd.concat([enum.placements(hostlib.sites_frame(LIBRARY), POOL), enum.anion_placements(LIBRARY, ["N", "F"])],
                        ignore_index=True).sort_values(enum.PLACEMENT_KEY).reset_index(drop=True))
    pd.testing.assert_frame_equal(expanded, direct)


def test_expansion_refuses_rows_out_of_type_order():
    types, members = enum.site_types(hostlib.sites_frame(LIBRARY[:3]))
    placed = enum.placements(types, POOL)
    with pytest.raises(AssertionError, match="grouped by site type"):
        enum.expand_to_hosts(placed.iloc[::-1], members)


def test_shard_stage_keeps_what_the_per_candidate_reference_keeps(tmp_path):
    sys.path.insert(0, str(REPO / "benchmarks"))
    from reference_screen import reference_screen

    rules = rulesets.load_ruleset(REPO / "rules" / "default.yaml")
    chosen = ["SrTiO3", "KTaO3", "TiO2-anatase", "ZnO", "Ga2O3-beta", "SrSnO3"]
    hosts = [h for h in LIBRARY if h.id in chosen]
    assert len(hosts) == len(chosen)
    library = tmp_path / "hosts.yaml"
    full = yaml.safe_load((REPO / "candidates" / "hosts.yaml").read_text())
    full["hosts"] = [h for h in full["hosts"] if h["id"] in chosen]
    library.write_text(yaml.safe_dump(full, sort_keys=False))
    pipeline.prepare_hosts(library, 100, tmp_path / "hosts.json")
    sections = [rules.section(s) for s in ("enumeration", "filters", "scarcity")]
    kept = pipeline.screen_shard(tmp_path / "hosts.json", 0, rules.pool_path, *sections, tmp_path / "k.parquet",
                                 tmp_path / "r.parquet", tmp_path / "f.csv")
    rejected = pd.read_parquet(tmp_path / "r.parquet")
    funnel = pd.read_csv(tmp_path / "f.csv")
    enumerated, reference_kept = reference_screen(hosts, rules.pool_path, *sections)
    # the reference has no perovskite-formability rule: what that rule removed, the reference keeps
    by_tolerance = set(rejected.loc[rejected["rule"] == "tolerance", "candidate_id"])
    assert set(kept["candidate_id"]) | by_tolerance == reference_kept
    assert int(funnel.groupby("host")["enumerated"].first().sum()) == enumerated
    assert len(kept) > 100


@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(host_picks=st.lists(st.sampled_from(range(len(LIBRARY))), min_size=1, max_size=8),
       pool_picks=st.lists(st.sampled_from(range(len(POOL))), min_size=1, max_size=40, unique=True))
def test_expansion_equals_host_by_host_for_any_hosts_and_pool(host_picks, pool_picks):
    # hosts may repeat (a library with two entries of one compound under other ids)
    hosts = [dataclasses.replace(LIBRARY[i], id=f"{LIBRARY[i].id}-{k}") for k, i in enumerate(host_picks)]
    pool = POOL.iloc[sorted(pool_picks)].reset_index(drop=True)
    types, members = enum.site_types(hostlib.sites_frame(hosts))
    expanded = enum.expand_to_hosts(enum.placements(types, pool), members)
    direct = enum.placements(hostlib.sites_frame(hosts), pool)
    pd.testing.assert_frame_equal(expanded, direct)
