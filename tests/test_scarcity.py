"""Tests for screening.scarcity against handbook values, the Gaultois et al. HHI table, the
published critical lists and pymatgen's own HHI and cost code."""

import warnings

import numpy as np
import pandas as pd
import pytest

from screening import scarcity
from screening.errors import DataMissingError, ScreeningError

RULES = {"min_crust_ppm": 0.5, "exclude_radioactive": True, "max_cost_usd_per_kg": 500,
         "max_hhi_production": None, "max_hhi_reserves": None}


# --- crustal abundance -----------------------------------------------------------------------

def test_rhodium_is_flagged_scarce():
    # CRC Handbook, "Abundance of elements in the earth's crust and in the sea" (via mendeleev
    # abundance_crust): Rh 0.001 mg/kg.
    facts = scarcity.element_facts(["Rh"])
    assert facts.loc["Rh", "abundance_crust_ppm"] == pytest.approx(0.001, rel=0.01)
    result = scarcity.audit_formula("SrTi0.98Rh0.02O3", RULES)
    rows = {row["symbol"]: row for row in result["elements"]}
    assert rows["Rh"]["below_min_crust_ppm"] is True
    assert rows["Ti"]["below_min_crust_ppm"] is False
    assert result["summary"]["scarcest_element"] == "Rh"
    check = {c["rule"]: c for c in result["checks"]}["min_crust_ppm"]
    assert check["passed"] is False and check["value"] == pytest.approx(0.001, rel=0.01)
    assert result["passed"] is False


def test_six_most_abundant_crustal_elements_in_handbook_order():
    # CRC Handbook, "Abundance of elements in the earth's crust and in the sea": O, Si, Al, Fe,
    # Ca, Na are the six most abundant, in that order; the values 4.61e5, 2.82e5, 8.23e4, 5.63e4,
    # 4.15e4, 2.36e4 mg/kg are the handbook's (from memory).
    abundance = scarcity.element_facts()["abundance_crust_ppm"]
    top = abundance.nlargest(6)
    assert list(top.index) == ["O", "Si", "Al", "Fe", "Ca", "Na"]
    assert top.to_numpy() == pytest.approx([4.61e5, 2.82e5, 8.23e4, 5.63e4, 4.15e4, 2.36e4], rel=1e-3)


# --- cost ------------------------------------------------------------------------------------

# Standard atomic weights (IUPAC/CIAAW conventional values, as mendeleev carries them) and
# mendeleev price_per_kg (Wikipedia "Prices of chemical elements", 2024 revision, USD/kg).
MASS = {"Sr": 87.62, "La": 138.90547, "Ti": 47.867, "Cr": 51.9961, "O": 15.999, "Rh": 102.9055}
PRICE = {"Sr": 6.53, "La": 4.78, "Ti": 11.1, "Cr": 9.40, "O": 0.154, "Rh": 147000.0}


def test_prices_and_masses_written_in_the_tests_are_the_ones_used():
    facts = scarcity.element_facts(list(MASS))
    assert facts["atomic_mass"].to_dict() == pytest.approx(MASS, rel=1e-6)
    assert facts["price_usd_per_kg"].to_dict() == pytest.approx(PRICE, rel=1e-6)
    assert (facts["price_year"] == 2024).all()
    assert facts["price_source"].str.contains("Prices of chemical elements").all()


def test_cost_of_codoped_strontium_titanate_is_mass_weighted_price():
    # Sr0.98La0.02Ti0.98Cr0.02O3, worked by hand:
    #   masses per formula unit (g/mol): Sr 0.98*87.62 = 85.8676, La 0.02*138.90547 = 2.7781094,
    #   Ti 0.98*47.867 = 46.90966, Cr 0.02*51.9961 = 1.039922, O 3*15.999 = 47.997; M = 184.5922914
    #   sum of mass*price = 560.7154 + 13.27936 + 520.6972 + 9.775267 + 7.391538 = 1111.8588
    #   cost = 1111.8588 / 184.5922914 = 6.0233 USD/kg; per mol = 1111.8588 / 1000 = 1.11186 USD/mol
    masses = {"Sr": 0.98 * MASS["Sr"], "La": 0.02 * MASS["La"], "Ti": 0.98 * MASS["Ti"],
              "Cr": 0.02 * MASS["Cr"], "O": 3 * MASS["O"]}
    molar_mass = sum(masses.values())
    by_hand = sum(masses[el] * PRICE[el] for el in masses) / molar_mass
    assert molar_mass == pytest.approx(184.5922914, rel=1e-9)
    assert by_hand == pytest.approx(6.0233, rel=1e-4)
    metrics = scarcity.composition_metrics(scarcity.amounts_from_formulas(["Sr0.98La0.02Ti0.98Cr0.02O3"])).iloc[0]
    assert metrics["molar_mass_g_mol"] == pytest.approx(molar_mass, rel=1e-9)
    assert metrics["cost_usd_per_kg"] == pytest.approx(by_hand, rel=1e-9)
    assert metrics["cost_usd_per_mol"] == pytest.approx(1.11186, rel=1e-4)


def test_cost_of_rhodium_doped_titanate_is_dominated_by_rhodium():
    # SrTi0.98Rh0.02O3 by hand: M = 87.62 + 46.90966 + 2.05811 + 47.997 = 184.58477 g/mol;
    # sum mass*price = 572.1586 + 520.6972 + 302542.17 + 7.3915 = 303642.42; cost = 1645.00 USD/kg.
    metrics = scarcity.composition_metrics(scarcity.amounts_from_formulas(["SrTi0.98Rh0.02O3"])).iloc[0]
    assert metrics["molar_mass_g_mol"] == pytest.approx(184.58477, rel=1e-7)
    assert metrics["cost_usd_per_kg"] == pytest.approx(1645.00, rel=1e-5)


def test_pymatgen_price_column_matches_pymatgen_cost_analyzer():
    # Reference library: pymatgen.analysis.cost.CostAnalyzer over its own costdb_elements.csv;
    # the price of a pure element per kg is the table's value for it.
    from pymatgen.analysis.cost import CostAnalyzer, CostDBElements

    facts = scarcity.element_facts(["Rh", "Ti", "Ga", "Ba"])
    with warnings.catch_warnings():
        # pymatgen warns about noble-gas electronegativities while it builds its table
        warnings.simplefilter("ignore")
        analyzer = CostAnalyzer(CostDBElements())
        expected = [float(analyzer.get_cost_per_kg(el)) for el in facts.index]
    assert facts["price_pymatgen_usd_per_kg"].to_numpy() == pytest.approx(expected, rel=1e-9)
    assert facts.loc["Ba", "price_pymatgen_year"] == 2019  # the row's own citation (Wikipedia, Aug 2019)
    assert facts.loc["Rh", "price_pymatgen_year"] == 2013  # Wolfram Alpha, Sep 2013


# --- HHI -------------------------------------------------------------------------------------

def test_hhi_of_titania_equals_hand_calculation_from_gaultois_table():
    # Gaultois et al., Chem. Mater. 25 (2013) 2911 (pymatgen hhi_data.csv): Ti production 1100,
    # reserves 1600; O 500 and 500.  Mass fraction of Ti in TiO2 = 47.867 / 79.865.
    w_ti = 47.867 / (47.867 + 2 * 15.999)
    hhi_p = w_ti * 1100 + (1 - w_ti) * 500
    hhi_r = w_ti * 1600 + (1 - w_ti) * 500
    assert hhi_p == pytest.approx(859.61, abs=0.01)
    metrics = scarcity.composition_metrics(scarcity.amounts_from_formulas(["TiO2"])).iloc[0]
    assert metrics["hhi_production"] == pytest.approx(hhi_p, rel=1e-9)
    assert metrics["hhi_reserves"] == pytest.approx(hhi_r, rel=1e-9)


def test_hhi_matches_pymatgen_hhimodel_for_several_oxides():
    # Reference library: pymatgen.analysis.hhi.HHIModel.get_hhi (mass-weighted, Gaultois et al.);
    # pymatgen's atomic masses differ from mendeleev's in the 4th-5th digit, hence rel=1e-4.
    from pymatgen.analysis.hhi import HHIModel

    formulas = ["TiO2", "SrTiO3", "Ga2O3", "Sr0.98La0.02Ti0.98Cr0.02O3", "NaTaO3", "BiVO4"]
    metrics = scarcity.composition_metrics(scarcity.amounts_from_formulas(formulas))
    model = HHIModel()
    expected = np.array([model.get_hhi(f) for f in formulas])
    assert metrics["hhi_production"].to_numpy() == pytest.approx(expected[:, 0], rel=1e-4)
    assert metrics["hhi_reserves"].to_numpy() == pytest.approx(expected[:, 1], rel=1e-4)


def test_hhi_bands_follow_the_merger_guidelines():
    # U.S. DoJ/FTC Horizontal Merger Guidelines (2010), as pymatgen's get_hhi_designation uses them.
    from pymatgen.analysis.hhi import HHIModel

    values = [0, 1499, 1500, 2500, 2501, 9000]
    pymatgen_words = [HHIModel().get_hhi_designation(v) for v in values]
    expected = [{"medium": "moderate"}.get(word, word) for word in pymatgen_words]
    assert expected == ["low", "low", "moderate", "moderate", "high", "high"]
    assert list(scarcity.hhi_designation(values)) == expected


# --- critical lists, radioactivity, toxicity ----------------------------------------------------

def test_eu_2024_list_membership():
    # Regulation (EU) 2024/1252: Annex II lists gallium, germanium, tungsten, cobalt, niobium,
    # tantalum and the platinum group metals; Annex I (strategic) gallium, germanium, tungsten,
    # cobalt, copper and the platinum group metals (from memory).  Iron and oxygen are on neither.
    facts = scarcity.element_facts()
    for el in ["Ga", "Ge", "W", "Co", "Nb", "Ta", "Rh", "Pt", "Pd"]:
        assert facts.loc[el, "eu_critical"], el
    for el in ["Ga", "Ge", "W", "Co", "Cu", "Rh"]:
        assert facts.loc[el, "eu_strategic"], el
    for el in ["Fe", "O"]:
        assert not facts.loc[el, "eu_critical"] and not facts.loc[el, "eu_strategic"], el


def test_eu_list_has_the_regulations_entry_counts():
    # Regulation (EU) 2024/1252: 17 strategic raw materials (Annex I) and 34 critical raw
    # materials (Annex II) (from memory).
    eu = scarcity.eu_list()
    assert eu.loc[eu["annex"] == "I", "raw_material"].nunique() == 17
    assert eu.loc[eu["annex"] == "II", "raw_material"].nunique() == 34
    # every strategic raw material's elements are also critical (Art. 4 of the Regulation)
    facts = scarcity.element_facts()
    assert facts.loc[facts["eu_strategic"], "eu_critical"].all()


def test_usgs_2022_list_membership():
    # USGS 2022 List of Critical Minerals, 87 FR 10381: 50 minerals, among them gallium, indium,
    # niobium, tantalum, tin, titanium and rhodium; not copper or iron (from memory).
    usgs = scarcity.usgs_list()
    assert usgs["mineral"].nunique() == 50
    facts = scarcity.element_facts()
    for el in ["Ga", "In", "Nb", "Ta", "Sn", "Ti", "Rh"]:
        assert facts.loc[el, "usgs_critical_2022"], el
    for el in ["Cu", "Fe", "O"]:
        assert not facts.loc[el, "usgs_critical_2022"], el


def test_radioactive_flags_come_from_mendeleev():
    # Common practice: Tc and Pm have no stable isotope and Th and U none either (primordial but
    # radioactive); Ti, Sr and O are stable.  The flags are mendeleev's is_radioactive.
    facts = scarcity.element_facts(["Tc", "Pm", "Th", "U", "Ti", "Sr", "O"])
    assert facts.loc[["Tc", "Pm", "Th", "U"], "radioactive"].all()
    assert not facts.loc[["Ti", "Sr", "O"], "radioactive"].any()


def test_rohs_metals_carry_toxicity_cautions():
    # Directive 2011/65/EU (RoHS) restricts Cd, Pb, Hg and Cr(VI): each must be flagged with a
    # caution line; Ti (TiO2) is not flagged.
    facts = scarcity.element_facts(["Cd", "Pb", "Hg", "Cr", "Ti"])
    assert facts.loc[["Cd", "Pb", "Hg", "Cr"], "toxic"].all()
    assert facts.loc[["Cd", "Pb", "Hg"], "toxicity_caution"].str.contains("RoHS").all()
    assert "Cr(VI)" in facts.loc["Cr", "toxicity_caution"]
    assert not facts.loc["Ti", "toxic"] and facts.loc["Ti", "toxicity_caution"] == ""


def test_critical_elements_column_lists_the_listed_elements_sorted():
    # By the two lists: Sr (EU Annex II strontium), La (EU light REE; USGS lanthanum), Ti (EU
    # titanium metal; USGS titanium), Cr (USGS chromium); O is on neither; Fe on neither.
    formulas = ["Sr0.98La0.02Ti0.98Cr0.02O3", "Fe2O3"]
    metrics = scarcity.composition_metrics(scarcity.amounts_from_formulas(formulas))
    assert list(metrics["critical_elements"]) == ["Cr;La;Sr;Ti", ""]
    assert list(metrics["scarcest_element"]) == ["La", "Fe"]  # CRC: La 39 ppm < Cr 102 ppm
    assert list(metrics["toxic_elements"]) == ["Cr", ""]


# --- shortlist ---------------------------------------------------------------------------------

def test_shortlist_audit_counts_listed_elements(tmp_path):
    # Counted by hand from the EU 2024/1252 and USGS 2022 lists (see the tests above): Sr and Ti
    # appear in 3 candidates, La, Cr, Rh and Ga in one each; O is on no list; Rh alone is below
    # 0.5 ppm (CRC Handbook 0.001 ppm); Cr alone carries a toxicity caution.
    path = tmp_path / "shortlist.csv"
    path.write_text("host,formula,note\n"
                    "SrTiO3,SrTiO3,undoped\n"
                    "SrTiO3,Sr0.98La0.02Ti0.98Cr0.02O3,codoped\n"
                    "SrTiO3,SrTi0.98Rh0.02O3,rh\n"
                    "Ga2O3,Ga2O3,undoped\n")
    result = scarcity.audit_shortlist(path, RULES)
    counts = {e["symbol"]: e["candidates"] for e in result["summary"]["elements"]}
    assert counts == {"Sr": 3, "Ti": 3, "La": 1, "Cr": 1, "Rh": 1, "Ga": 1}
    flags = {e["symbol"]: e for e in result["summary"]["elements"]}
    assert [s for s, e in flags.items() if e["below_min_crust_ppm"]] == ["Rh"]
    assert [s for s, e in flags.items() if e["toxic"]] == ["Cr"]
    assert result["summary"]["n_candidates"] == 4
    # the Rh candidate fails the abundance floor and the 500 USD/kg ceiling (1645 USD/kg above)
    assert result["summary"]["n_passed"] == 3
    rh = result["candidates"][2]
    assert rh["line"] == 4 and rh["pass_min_crust_ppm"] is False and rh["pass_max_cost_usd_per_kg"] is False


def test_shortlist_without_required_columns_is_rejected(tmp_path):
    path = tmp_path / "bad.csv"
    path.write_text("host,composition\nSrTiO3,SrTiO3\n")
    with pytest.raises(ScreeningError, match="missing required column.*formula"):
        scarcity.audit_shortlist(path)


def test_shortlist_with_bad_formula_names_the_line(tmp_path):
    path = tmp_path / "bad.csv"
    path.write_text("host,formula\nSrTiO3,SrTiO3\nSrTiO3,SrTi0.98Qq0.02O3\n")
    with pytest.raises(ScreeningError, match=r"line 3.*unknown element symbol 'Qq'"):
        scarcity.audit_shortlist(path)


# --- bad input and missing data --------------------------------------------------------------

@pytest.mark.parametrize("text", ["", "   ", "Xx2O3", "TiO₂", "Ti(O2", "Ti0O2"])
def test_bad_formulas_raise(text):
    with pytest.raises(ScreeningError):
        scarcity.audit_formula(text)


def test_missing_value_raises_naming_element_and_column():
    # mendeleev has no crustal abundance for Tc and Gaultois et al. give no HHI for it.
    amounts = scarcity.amounts_from_formulas(["SrTi0.98Tc0.02O3"])
    with pytest.raises(DataMissingError, match=r"Tc: abundance_crust_ppm.*Tc: hhi_production"):
        scarcity.composition_metrics(amounts)


def test_element_absent_from_every_row_needs_no_data():
    # a Tc column of zeros must not stop the metrics (nothing of it is present)
    amounts = pd.DataFrame({"Ti": [1.0], "O": [2.0], "Tc": [0.0]})
    metrics = scarcity.composition_metrics(amounts)
    assert metrics["scarcest_element"].iloc[0] == "Ti"


@pytest.mark.parametrize("amounts, message", [
    (pd.DataFrame({"Ti": [1.0], "O": [-2.0]}), "negative"),
    (pd.DataFrame({"Ti": [1.0], "Oo": [2.0]}), "unknown element"),
    (pd.DataFrame({"Ti": [np.nan], "O": [2.0]}), "NaN"),
    (pd.DataFrame({"Ti": [0.0], "O": [0.0]}), "no element"),
])
def test_bad_amounts_raise(amounts, message):
    with pytest.raises(ScreeningError, match=message):
        scarcity.composition_metrics(amounts)


def test_rules_out_of_range_or_unknown_key_raise(tmp_path):
    bad = dict(RULES, max_hhi_production=20000)
    with pytest.raises(ScreeningError, match="max_hhi_production"):
        scarcity.validate_scarcity_rules(bad)
    with pytest.raises(ScreeningError, match="min_crust"):
        scarcity.validate_scarcity_rules({"min_crust": 1})
    path = tmp_path / "rules.yaml"
    path.write_text("name: demo\n")
    with pytest.raises(ScreeningError, match=r"rules\.yaml.*scarcity"):
        scarcity.load_scarcity_rules(path)


def test_null_thresholds_are_not_checked():
    rules = dict(RULES, min_crust_ppm=None, max_cost_usd_per_kg=None, exclude_radioactive=False)
    result = scarcity.audit_formula("SrTi0.98Rh0.02O3", rules)
    assert result["checks"] == [] and result["passed"] is None


def test_threshold_checks_pass_at_the_limit_and_fail_beyond():
    # The rule set's wording (common practice for floors and ceilings): "at least" min_crust_ppm,
    # "at most" each ceiling, and no radioactive element when exclude_radioactive is true.
    # Radioactive elements lack Gaultois HHI values, so their metrics are written out here.
    metrics = pd.DataFrame({
        "scarcest_abundance_ppm": [0.5, 0.49, 10.0],
        "radioactive_elements": ["", "", "Th"],
        "cost_usd_per_kg": [500.0, 10.0, 500.01],
        "hhi_production": [1000.0, 1000.0, 1000.0],
        "hhi_reserves": [1000.0, 1000.0, 1000.0],
    }, index=["at limits", "too scarce", "radioactive and dear"])
    checks = scarcity.threshold_checks(metrics, scarcity.validate_scarcity_rules(RULES))
    assert list(checks.columns) == ["min_crust_ppm", "exclude_radioactive", "max_cost_usd_per_kg", "passes"]
    assert list(checks["passes"]) == [True, False, False]
    assert list(checks["min_crust_ppm"]) == [True, False, True]
    assert list(checks["exclude_radioactive"]) == [True, True, False]
    assert list(checks["max_cost_usd_per_kg"]) == [True, True, False]
