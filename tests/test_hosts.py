"""The host library and its loader."""
from __future__ import annotations

from pathlib import Path

import pytest

from screening import hosts as hostlib
from screening.errors import ScreeningError

LIBRARY = Path(__file__).resolve().parents[1] / "candidates" / "hosts.yaml"


def test_library_covers_the_families_the_screen_is_for():
    hosts = {h.id: h for h in hostlib.load_hosts(LIBRARY)}
    assert len(hosts) >= 20
    required = {"SrTiO3", "TiO2-anatase", "TiO2-rutile", "ZnO", "SnO2", "WO3", "Ta2O5", "Ga2O3-beta",
                "ZrO2-monoclinic", "CeO2", "In2O3", "BiVO4", "Fe2O3-alpha", "NaTaO3", "KTaO3", "NaNbO3",
                "SrSnO3", "BaSnO3"}
    assert required <= set(hosts)
    families = {h.family for h in hosts.values()}
    assert {"perovskite", "spinel", "layered-perovskite"} <= families
    for host in hosts.values():
        assert host.gap_source.strip(), host.id


def test_every_host_is_neutral_and_reproduces_its_formula():
    from screening.formulas import parse_formula

    for host in hostlib.load_hosts(LIBRARY):
        charge = sum(s.oxidation_state * s.multiplicity for s in host.sites) \
            + host.anion.oxidation_state * host.anion.multiplicity
        assert charge == 0, host.id
        assert host.composition() == parse_formula(host.formula), host.id


def test_site_radii_are_shannon_values():
    # Shannon 1976: Sr2+ (XII) 1.44, Ti4+ (VI) 0.605, O2- (VI) 1.40; Zn2+ (IV) 0.60.
    hosts = {h.id: h for h in hostlib.load_hosts(LIBRARY)}
    sr, ti = hosts["SrTiO3"].sites
    assert (sr.radius_a, ti.radius_a, hosts["SrTiO3"].anion.radius_a) == pytest.approx((1.44, 0.605, 1.40))
    assert hosts["ZnO"].sites[0].radius_a == pytest.approx(0.60)


def _write(tmp_path, body: str) -> Path:
    path = tmp_path / "hosts.yaml"
    path.write_text("hosts:\n" + body)
    return path


GOOD = """  - id: X
    formula: TiO2
    family: rutile
    gap_ev: 3.0
    gap_source: test
    sites:
      - {label: Ti, element: Ti, oxidation_state: 4, coordination: 6, multiplicity: 1}
    anion: {element: O, oxidation_state: -2, coordination: 3, multiplicity: 2}
"""


def test_loader_accepts_a_good_entry(tmp_path):
    assert hostlib.load_hosts(_write(tmp_path, GOOD))[0].id == "X"


@pytest.mark.parametrize("change,message", [
    (("oxidation_state: 4", "oxidation_state: 3"), "not neutral"),
    (("element: Ti", "element: Tx"), "unknown element"),
    (("coordination: 6", "coordination: 12"), "no Shannon radius"),
    (("id: X", "id: ../X"), "letters, digits"),
    (("gap_ev: 3.0", "gap_ev: -1"), "gap_ev"),
    (("formula: TiO2", "formula: TiO3"), "formula"),
    (("    gap_source: test\n", ""), "gap_source"),
    (("oxidation_state: 4", "oxidation_state: 7"), "does not take"),
])
def test_loader_rejects_bad_entries_naming_the_field(tmp_path, change, message):
    path = _write(tmp_path, GOOD.replace(*change))
    with pytest.raises(ScreeningError) as error:
        hostlib.load_hosts(path)
    assert message in str(error.value)
    assert str(path) in str(error.value)


def test_duplicate_ids_are_refused(tmp_path):
    with pytest.raises(ScreeningError, match="duplicate host id"):
        hostlib.load_hosts(_write(tmp_path, GOOD + GOOD))
