"""Enumeration of substitutional dopants and charge-compensated dopant–codopant pairs.

Conventions (Kröger & Vink, Solid State Phys. 3 (1956) 307): an ion of charge q
on a host site of charge q_site carries the effective charge
delta = q - q_site, written • per positive unit, ′ per negative unit and × for
zero.  An acceptor (delta < 0) and a donor (delta > 0) compensate each other in
the smallest positive integer ratio n_a : n_d with n_a * delta_a + n_d * delta_d = 0
(n_a = delta_d / g, n_d = -delta_a / g, g = gcd).  An acceptor alone can be
compensated by oxygen vacancies, one V_O•• per two negative units; a donor
alone by electrons where the rule set allows it.

The work is split in two so that no pair is ever built from an ion that a
single-ion rule already removed:

* :func:`placements` -- every pool ion on every cation site (vectorised cross join);
  :func:`anion_placements` -- the rule set's anion dopants (N3-, F-, S2-, Cl-) on the
  oxide-ion site, in the same frame layout, so that N_O′ pairs with a donor such
  as Nb_Ti• (1:1) and F_O• with an acceptor such as Cr_Ti′ like any other ions;
* :func:`combine` -- singles and acceptor × donor pairs from the placements that
  survived the single-ion rules, joined per host on the sign of the effective
  charge.  Charges and ratios are integers; amounts per formula unit are exact
  rationals (numerator / denominator integer columns).
"""
from __future__ import annotations

from fractions import Fraction

import numpy as np
import pandas as pd

from screening import ions
from screening.errors import ScreeningError
from screening.formulas import format_formula
from screening.hosts import Host

PLACEMENT_KEY = ["host", "site", "element", "charge"]


def placements(sites: pd.DataFrame, pool: pd.DataFrame) -> pd.DataFrame:
    """Every pool ion on every cation site, with its radius at the site's coordination.

    ``sites``: from :func:`screening.hosts.sites_frame`; ``pool``: element, charge, common.
    The host's own ion on its own site is not a dopant and is left out; another
    oxidation state of the site's element is kept (it is a real defect).
    """
    crossed = sites.merge(pool, how="cross")
    crossed = crossed[~((crossed["element"] == crossed["site_element"])
                        & (crossed["charge"] == crossed["site_charge"]))]
    radii = ions.lookup_radii(crossed[["element", "charge", "coordination"]])
    crossed = crossed.reset_index(drop=True)
    crossed["radius_a"] = radii["radius_a"].to_numpy()
    crossed["radius_estimated"] = radii["radius_estimated"].to_numpy()
    crossed["spin"] = radii["spin"].to_numpy()
    return _finish_placements(crossed)


def _finish_placements(crossed: pd.DataFrame) -> pd.DataFrame:
    crossed["delta"] = (crossed["charge"] - crossed["site_charge"]).astype(np.int64)
    crossed["mismatch"] = (crossed["radius_a"] - crossed["site_radius_a"]).abs() / crossed["site_radius_a"]
    crossed["ion"] = _ion_labels(crossed["element"], crossed["charge"])
    return crossed.sort_values(PLACEMENT_KEY).reset_index(drop=True)


ANION_DOPANT_CHARGE = {"N": -3, "F": -1, "S": -2, "Cl": -1}
"""The anion each anion-dopant element forms on an oxide-ion site (nitride, fluoride, sulfide, chloride)."""


def anion_sites_frame(hosts: list[Host]) -> pd.DataFrame:
    """The oxide-ion site of every host, in the layout of :func:`screening.hosts.sites_frame`."""
    return pd.DataFrame([
        {"host": h.id, "site": h.anion.label, "site_element": h.anion.element,
         "site_charge": h.anion.oxidation_state, "coordination": h.anion.coordination,
         "multiplicity": h.anion.multiplicity, "site_radius_a": h.anion.radius_a, "host_gap_ev": h.gap_ev}
        for h in hosts])


def anion_placements(hosts: list[Host], elements) -> pd.DataFrame:
    """The anion dopants ``elements`` (keys of :data:`ANION_DOPANT_CHARGE`) on each host's oxide-ion site.

    Radii are Shannon's at the anion site's coordination.  Shannon tabulates N3-
    (IV) and S2- (VI) at one coordination only, so the straight-line estimate of
    :func:`screening.ions.lookup_radii` has nothing to fit; there the radius is
    scaled by the host anion's own coordination trend,
    r(CN) = r_tab(CN_tab) x r_O(CN) / r_O(CN_tab), and marked estimated.  An ion with
    no tabulated radius at all keeps NaN (the radius rule rejects it).
    """
    elements = list(dict.fromkeys(elements))
    unknown = [e for e in elements if e not in ANION_DOPANT_CHARGE]
    if unknown:
        raise ScreeningError(f"anion dopant(s) {', '.join(map(str, unknown))} not supported; allowed: "
                             + ", ".join(ANION_DOPANT_CHARGE), field="enumeration.anion_dopants")
    charges = [ANION_DOPANT_CHARGE[e] for e in elements]
    states = ions.load_ion_data().states.set_index(["element", "charge"])["common"]
    common = [bool(states.get((e, q), False)) for e, q in zip(elements, charges)]
    pool = pd.DataFrame({"element": elements, "charge": charges, "common": common})
    crossed = placements(anion_sites_frame(hosts), pool).drop(columns=["delta", "mismatch", "ion"])

    table = ions.load_ion_data().radii
    plain = table[table["geometry"] == ""]
    tabulated = plain.groupby(["element", "charge"])["coordination"].agg(["nunique", "first"])
    key = pd.MultiIndex.from_frame(crossed[["element", "charge"]])
    n_tab = tabulated["nunique"].reindex(key).to_numpy()
    cn_tab = tabulated["first"].reindex(key).to_numpy()
    scale = crossed["radius_a"].isna().to_numpy() & (n_tab == 1)
    if scale.any():
        rows = crossed[scale]
        r_tab = ions.lookup_radii(pd.DataFrame({"element": rows["element"].to_numpy(),
                                                "charge": rows["charge"].to_numpy(),
                                                "coordination": cn_tab[scale].astype(int)}))["radius_a"].to_numpy()
        host_ion = {"element": rows["site_element"].to_numpy(), "charge": rows["site_charge"].to_numpy()}
        r_o_site = ions.lookup_radii(pd.DataFrame({**host_ion, "coordination": rows["coordination"].to_numpy()}))
        r_o_tab = ions.lookup_radii(pd.DataFrame({**host_ion, "coordination": cn_tab[scale].astype(int)}))
        crossed.loc[scale, "radius_a"] = r_tab * r_o_site["radius_a"].to_numpy() / r_o_tab["radius_a"].to_numpy()
        crossed.loc[scale, "radius_estimated"] = True
    return _finish_placements(crossed)


def _ion_labels(elements: pd.Series, charges: pd.Series) -> pd.Series:
    magnitude = charges.abs().astype(str).where(charges.abs() != 1, "")
    sign = pd.Series(np.where(charges > 0, "+", "-"), index=charges.index)
    return elements.astype(str) + magnitude + sign


_MAX_MARKS = 16
# marks[d + _MAX_MARKS] is the Kröger–Vink mark of effective charge d: a table look-up, not a loop
_MARKS = np.array(["′" * -d if d < 0 else ("•" * d if d > 0 else "×") for d in range(-_MAX_MARKS, _MAX_MARKS + 1)],
                  dtype=object)


def _charge_marks(delta: pd.Series) -> pd.Series:
    return pd.Series(_MARKS[delta.to_numpy(np.int64) + _MAX_MARKS], index=delta.index, dtype=object)


def _kv(element: pd.Series, site: pd.Series, delta: pd.Series) -> pd.Series:
    return element.astype(str) + "_" + site.astype(str) + _charge_marks(delta)


def _coefficient(n) -> pd.Series:
    """'' for one, 'n ' otherwise: the count written before a defect."""
    n = pd.Series(n) if not isinstance(n, pd.Series) else n
    return (n.astype(str) + " ").where(n != 1, "")


_PLACEMENT_COLUMNS = ["host", "site", "site_element", "site_charge", "coordination", "multiplicity",
                      "element", "charge", "ion", "delta", "radius_a", "radius_estimated", "spin", "mismatch"]


def combine(kept: pd.DataFrame, enumeration: dict, dopant_fraction: Fraction) -> pd.DataFrame:
    """Singles and compensated pairs from the placements that passed the single-ion rules.

    Returns one row per candidate.  The dopant of a pair is the acceptor, the
    codopant the donor; ``n_dopant : n_codopant`` is the exact smallest ratio.
    Amounts per formula unit are rationals ``*_num / amount_den``.
    Candidates that are not charge balanced (an aliovalent single without an
    allowed compensation) are still returned, with ``compensation == 'none'``;
    the charge-balance rule removes them with a record.
    """
    kept = kept[_PLACEMENT_COLUMNS]
    frames = []
    if enumeration["singles"]:
        frames.append(_singles(kept, enumeration))
    if enumeration["pairs"]:
        frames.append(_pairs(kept))
    candidates = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()
    if candidates.empty:
        return _no_candidates(dopant_fraction)
    return _finish(candidates, dopant_fraction)


def _no_candidates(dopant_fraction: Fraction) -> pd.DataFrame:
    """An empty candidate table with the columns and dtypes of a full one.

    pandas cannot infer string dtypes of empty columns, so the table is made from
    one acceptor and one donor placeholder and then emptied: the rules downstream
    see the same schema whether or not anything survived.
    """
    placeholder = pd.DataFrame({
        "host": ["-", "-"], "site": ["Ti", "Ti"], "site_element": ["Ti", "Ti"], "site_charge": [4, 4],
        "coordination": [6, 6], "multiplicity": [1, 1], "element": ["Cr", "Nb"], "charge": [3, 5],
        "ion": ["Cr3+", "Nb5+"], "delta": [-1, 1], "radius_a": [0.615, 0.64], "radius_estimated": [False, False],
        "spin": ["", ""], "mismatch": [0.0, 0.0]})
    options = {"singles": True, "pairs": True, "vacancy_compensation": True, "electron_compensation": True}
    frames = [_singles(placeholder, options), _pairs(placeholder)]
    return _finish(pd.concat(frames, ignore_index=True), dopant_fraction).iloc[0:0].reset_index(drop=True)


def _singles(kept: pd.DataFrame, enumeration: dict) -> pd.DataFrame:
    singles = kept.add_prefix("dopant_").rename(columns={"dopant_host": "host"})
    singles["kind"] = "single"
    singles["n_dopant"] = 1
    singles["n_codopant"] = 0
    delta = singles["dopant_delta"]
    compensation = np.select(
        [delta == 0,
         (delta < 0) & enumeration["vacancy_compensation"],
         (delta > 0) & enumeration["electron_compensation"]],
        ["isovalent", "oxygen_vacancy", "electrons"], default="none")
    singles["compensation"] = compensation
    return singles


def _pairs(kept: pd.DataFrame) -> pd.DataFrame:
    acceptors = kept[kept["delta"] < 0].add_prefix("dopant_").rename(columns={"dopant_host": "host"})
    donors = kept[kept["delta"] > 0].add_prefix("codopant_").rename(columns={"codopant_host": "host"})
    pairs = acceptors.merge(donors, on="host", how="inner")
    a = -pairs["dopant_delta"].to_numpy(np.int64)
    d = pairs["codopant_delta"].to_numpy(np.int64)
    g = np.gcd(a, d)
    pairs["n_dopant"] = d // g
    pairs["n_codopant"] = a // g
    pairs["kind"] = "pair"
    pairs["compensation"] = "codopant"
    return pairs


def _finish(c: pd.DataFrame, x: Fraction) -> pd.DataFrame:
    """Ratios, site fractions, exact amounts, Kröger–Vink defects, ids."""
    pair = c["kind"] == "pair"
    for column in ("codopant_site", "codopant_element", "codopant_ion"):
        c[column] = c[column].fillna("").astype(str) if column in c else ""
    for column in ("codopant_charge", "codopant_delta", "codopant_multiplicity", "codopant_site_charge",
                   "codopant_coordination"):
        c[column] = c[column].fillna(0).astype(np.int64) if column in c else 0
    for column in ("codopant_mismatch", "codopant_radius_a"):
        c[column] = c[column].astype(float) if column in c else np.nan
    c["codopant_radius_estimated"] = (c["codopant_radius_estimated"].fillna(False).astype(bool)
                                      if "codopant_radius_estimated" in c else False)
    c["n_dopant"] = c["n_dopant"].astype(np.int64)
    c["n_codopant"] = c["n_codopant"].astype(np.int64)

    # Dopant ions per formula unit = x * m_dopant_site; codopant = that * n_c / n_d.
    # Common denominator: x.denominator * n_dopant (times 2 for vacancies).
    m_d = c["dopant_multiplicity"].to_numpy(np.int64)
    n_d = c["n_dopant"].to_numpy(np.int64)
    n_c = c["n_codopant"].to_numpy(np.int64)
    den = np.int64(x.denominator) * n_d * 2
    c["amount_den"] = den
    c["dopant_num"] = np.int64(x.numerator) * m_d * n_d * 2
    c["codopant_num"] = np.int64(x.numerator) * m_d * n_c * 2
    vacancy = c["compensation"].eq("oxygen_vacancy").to_numpy()
    # one V_O per two negative units: |delta| * dopant amount / 2
    c["vacancy_num"] = np.where(vacancy, np.int64(x.numerator) * m_d * n_d * (-c["dopant_delta"].to_numpy()), 0)
    c["dopant_fraction"] = c["dopant_num"] / c["amount_den"] / c["dopant_multiplicity"]
    c["codopant_fraction"] = np.where(pair, c["codopant_num"] / c["amount_den"]
                                      / c["codopant_multiplicity"].where(pair, 1), 0.0)
    c["ratio"] = np.where(pair, c["n_dopant"].astype(str) + ":" + c["n_codopant"].astype(str), "")
    c["max_ratio_count"] = np.maximum(c["n_dopant"], c["n_codopant"])

    dopant_kv = _kv(c["dopant_element"], c["dopant_site"], c["dopant_delta"])
    codopant_kv = _kv(c["codopant_element"], c["codopant_site"], c["codopant_delta"])
    # an acceptor of |delta| = a with vacancies: the smallest neutral set is (2/g) M + (a/g) V_O, g = gcd(a, 2)
    a = np.where(vacancy, -c["dopant_delta"].to_numpy(np.int64), 1)
    g = np.gcd(a, 2)
    with_vacancies = (_coefficient(pd.Series(2 // g, index=c.index)) + dopant_kv + " + "
                      + _coefficient(pd.Series(a // g, index=c.index)) + "V_O••")
    with_electrons = dopant_kv + " + " + c["dopant_delta"].astype(str) + " e′"
    c["defects"] = np.select(
        [pair.to_numpy(), vacancy, c["compensation"].eq("electrons").to_numpy()],
        [_coefficient(c["n_dopant"]) + dopant_kv + " + " + _coefficient(c["n_codopant"]) + codopant_kv,
         with_vacancies, with_electrons], default=dopant_kv)
    c["candidate_id"] = (c["host"] + "/" + c["dopant_ion"] + "@" + c["dopant_site"]
                         + np.where(pair, "+" + c["codopant_ion"] + "@" + c["codopant_site"],
                                    np.where(vacancy, "+V_O", "")))
    return c.sort_values("candidate_id", kind="stable").reset_index(drop=True)


def candidate_amounts(candidates: pd.DataFrame, hosts: dict[str, Host]) -> pd.DataFrame:
    """Atoms per formula unit (float) of each candidate: one column per element.

    Built from the host's composition with the exact substitution amounts.
    """
    elements = sorted({e for h in hosts.values() for e in h.composition()}
                      | set(candidates["dopant_element"]) | (set(candidates["codopant_element"]) - {""}))
    matrix = np.zeros((len(candidates), len(elements)))
    column = {e: i for i, e in enumerate(elements)}
    host_matrix = np.zeros((len(hosts), len(elements)))
    host_row = {}
    for i, (host_id, host) in enumerate(hosts.items()):
        host_row[host_id] = i
        for element, amount in host.composition().items():
            host_matrix[i, column[element]] = float(amount)
    # integer indices even for an empty frame (a rule may have removed every candidate)
    rows = candidates["host"].map(host_row).to_numpy(np.int64)
    matrix[:] = host_matrix[rows]
    index = np.arange(len(candidates))
    den = candidates["amount_den"].to_numpy(float)
    dopant = candidates["dopant_num"].to_numpy(float) / den
    codopant = candidates["codopant_num"].to_numpy(float) / den
    vacancy = candidates["vacancy_num"].to_numpy(float) / den
    # np.add.at accumulates where a dopant replaces its own element's other site
    np.add.at(matrix, (index, candidates["dopant_site_element"].map(column).to_numpy(np.int64)), -dopant)
    np.add.at(matrix, (index, candidates["dopant_element"].map(column).to_numpy(np.int64)), dopant)
    pair = candidates["kind"].eq("pair").to_numpy()
    if pair.any():
        np.add.at(matrix, (index[pair], candidates.loc[pair, "codopant_site_element"].map(column).to_numpy(np.int64)),
                  -codopant[pair])
        np.add.at(matrix, (index[pair], candidates.loc[pair, "codopant_element"].map(column).to_numpy(np.int64)),
                  codopant[pair])
    if "O" in column:
        matrix[:, column["O"]] -= vacancy
    return pd.DataFrame(matrix, columns=elements, index=candidates.index)


def candidate_formula(row: pd.Series, host: Host) -> str:
    """Formula of one candidate, e.g. Sr0.98La0.02Ti0.98Cr0.02O3 (used for survivors only).

    Amounts that are not finite decimals (a 1:3 pair at 2 %) are rounded to 4 decimals for
    display; :func:`candidate_composition` gives the exact amounts.
    """
    amounts, order = _composition(row, host)
    return format_formula(amounts, order)


def candidate_formulas(candidates: pd.DataFrame, hosts: dict[str, Host]) -> list[str]:
    """The formulas of many candidates, as :func:`candidate_formula` writes them, without Fractions.

    Amounts stay integers over the common denominator ``amount_den``; one pass over
    plain tuples, for the survivors that reach the shortlist.
    """
    def amount_text(element: str, num: int, den: int) -> str:
        if num == 0:
            return ""
        if num == den:
            return element
        if num % den == 0:
            return f"{element}{num // den}"
        return f"{element}{num / den:.4f}".rstrip("0").rstrip(".")

    layouts = {h_id: ([(s.label, s.element, s.multiplicity) for s in h.sites],
                      (h.anion.label, h.anion.element, h.anion.multiplicity)) for h_id, h in hosts.items()}
    columns = ["host", "kind", "amount_den", "dopant_site", "dopant_element", "dopant_num", "codopant_site",
               "codopant_element", "codopant_num", "vacancy_num"]
    formulas = []
    for host_id, kind, den, d_site, d_el, d_num, c_site, c_el, c_num, v_num in \
            candidates[columns].itertuples(index=False, name=None):
        sites, (anion_label, anion_element, anion_m) = layouts[host_id]
        den, d_num, c_num, v_num = int(den), int(d_num), int(c_num), int(v_num)
        on = {d_site: [(d_el, d_num)]}
        if kind == "pair":
            on.setdefault(c_site, []).append((c_el, c_num))
        amounts: dict[str, int] = {}
        for label, element, m in sites:
            substituted = on.get(label, [])
            amounts[element] = amounts.get(element, 0) + m * den - sum(n for _, n in substituted)
            for el, n in substituted:
                amounts[el] = amounts.get(el, 0) + n
        on_anion = on.get(anion_label, [])
        amounts[anion_element] = amounts.get(anion_element, 0) + anion_m * den - v_num - sum(n for _, n in on_anion)
        for el, n in on_anion:
            amounts[el] = amounts.get(el, 0) + n
        formulas.append("".join(amount_text(el, n, den) for el, n in amounts.items()))
    return formulas


def candidate_composition(row: pd.Series, host: Host) -> dict[str, Fraction]:
    """Exact amounts per formula unit of one candidate."""
    return _composition(row, host)[0]


def _composition(row: pd.Series, host: Host) -> tuple[dict[str, Fraction], list[str]]:
    den = int(row["amount_den"])
    amounts: dict[str, Fraction] = {}
    order: list[str] = []
    substitutions = {row["dopant_site"]: [(row["dopant_element"], Fraction(int(row["dopant_num"]), den))]}
    if row["kind"] == "pair":
        substitutions.setdefault(row["codopant_site"], []).append(
            (row["codopant_element"], Fraction(int(row["codopant_num"]), den)))
    for site in host.sites:
        removed = sum((a for _, a in substitutions.get(site.label, [])), Fraction(0))
        _add(amounts, order, site.element, Fraction(site.multiplicity) - removed)
        for element, amount in substitutions.get(site.label, []):
            _add(amounts, order, element, amount)
    # anion-site dopants (N_O, F_O ...) replace oxide ions: written after O, as in SrTiO2.94N0.06
    on_anion = substitutions.get(host.anion.label, [])
    _add(amounts, order, host.anion.element,
         Fraction(host.anion.multiplicity) - Fraction(int(row["vacancy_num"]), den)
         - sum((a for _, a in on_anion), Fraction(0)))
    for element, amount in on_anion:
        _add(amounts, order, element, amount)
    return amounts, order


def _add(amounts: dict, order: list, element: str, amount: Fraction) -> None:
    if element not in amounts:
        order.append(element)
        amounts[element] = Fraction(0)
    amounts[element] += amount


def net_charge(candidates: pd.DataFrame) -> np.ndarray:
    """Exact net charge per formula unit of the substitution (integers over amount_den); 0 = neutral.

    Electron compensation counts the electrons; an uncompensated single gives its
    own charge.
    """
    dopant = candidates["dopant_num"].to_numpy(np.int64) * candidates["dopant_delta"].to_numpy(np.int64)
    codopant = candidates["codopant_num"].to_numpy(np.int64) * candidates["codopant_delta"].to_numpy(np.int64)
    vacancy = candidates["vacancy_num"].to_numpy(np.int64) * 2
    electrons = np.where(candidates["compensation"].eq("electrons"), -dopant, 0)
    return dopant + codopant + vacancy + electrons
