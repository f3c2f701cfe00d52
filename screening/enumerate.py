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

* :func:`site_types` -- the distinct sites of a shard's hosts: the single-ion rules depend
  on the ion and the site alone (label, element, charge, coordination, radius), so they
  judge each ion once per distinct site, and :func:`expand_to_hosts` hands the result to
  every host site of that type (all titanates share one Ti4+(VI) site);
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
    """The anion dopants ``elements`` on each host's oxide-ion site (see :func:`anion_site_placements`)."""
    return anion_site_placements(anion_sites_frame(hosts), elements)


def anion_site_placements(anion_sites: pd.DataFrame, elements) -> pd.DataFrame:
    """The anion dopants ``elements`` (keys of :data:`ANION_DOPANT_CHARGE`) on oxide-ion sites.

    ``anion_sites``: from :func:`anion_sites_frame` (or distinct anion sites of :func:`site_types`).

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
    crossed = placements(anion_sites, pool).drop(columns=["delta", "mismatch", "ion"])

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


SITE_TYPE_COLUMNS = ["site", "site_element", "site_charge", "coordination", "site_radius_a"]
"""What a single-ion rule may look at of a site; the rest (host, multiplicity, gap) is the host's."""


def site_types(sites: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The distinct sites of ``sites`` (rows of :func:`screening.hosts.sites_frame` or
    :func:`anion_sites_frame`), and which host sites are of which type.

    Returns ``(types, members)``.  ``types`` has the layout of ``sites`` with ``host``
    holding the integer type number (multiplicity and gap are those of the type's first
    host and are replaced on expansion); ``members`` has one row per host site, in
    (host, site) order, with its ``site_type``.
    """
    members = sites.sort_values(["host", "site"], kind="stable").reset_index(drop=True)
    members["site_type"] = members.groupby(SITE_TYPE_COLUMNS, sort=False, dropna=False).ngroup().astype(np.int64)
    types = members.drop_duplicates("site_type").sort_values("site_type")
    types = types.assign(host=types["site_type"]).drop(columns="site_type").reset_index(drop=True)
    return types, members


def expand_to_hosts(frame: pd.DataFrame, members: pd.DataFrame) -> pd.DataFrame:
    """The rows of a per-site-type ``frame`` (``host`` = type number, rows grouped by type in
    ascending order, as :func:`placements` and the rules leave them) repeated for every host
    site of that type, in (host, site, row) order: the order of placements built host by host.
    ``host`` becomes the host id; ``multiplicity`` and ``host_gap_ev``, where present, the host's.
    """
    row_type = frame["host"].to_numpy(np.int64)
    if np.any(np.diff(row_type) < 0):
        raise AssertionError("expand_to_hosts needs the rows grouped by site type in ascending order")
    member_type = members["site_type"].to_numpy(np.int64)
    per_type = np.bincount(row_type, minlength=int(member_type.max(initial=-1)) + 1)
    first_row = np.cumsum(per_type) - per_type
    lengths = per_type[member_type]
    # row k of the result: the (k - start of its member)-th row of its member's type
    member_start = np.cumsum(lengths) - lengths
    index = (np.arange(int(lengths.sum())) - np.repeat(member_start, lengths)
             + np.repeat(first_row[member_type], lengths))
    expanded = frame.take(index).reset_index(drop=True)
    expanded["host"] = np.repeat(members["host"].to_numpy(), lengths)
    for column in ("multiplicity", "host_gap_ev"):
        if column in expanded:
            expanded[column] = np.repeat(members[column].to_numpy(), lengths)
    return expanded


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


_COUNTS = np.array([""] + [f"{n} " if n != 1 else "" for n in range(1, 2 * _MAX_MARKS + 1)], dtype=object)
# _COUNTS[n]: the count written before n defects of a kind ('' for one); a look-up, not a format per row


_PLACEMENT_COLUMNS = ["host", "site", "site_element", "site_charge", "coordination", "multiplicity",
                      "element", "charge", "ion", "delta", "radius_a", "radius_estimated", "spin", "mismatch"]
_LABEL_COLUMNS = ["kv", "tag"]
"""Per-placement text (Kröger–Vink defect, ion@site) that _finish assembles into each candidate's
defects and id: written once per placement rather than once per candidate."""


def combine(kept: pd.DataFrame, enumeration: dict, dopant_fraction: Fraction) -> pd.DataFrame:
    """Singles and compensated pairs from the placements that passed the single-ion rules.

    Returns one row per candidate.  The dopant of a pair is the acceptor, the
    codopant the donor; ``n_dopant : n_codopant`` is the exact smallest ratio.
    Amounts per formula unit are rationals ``*_num / amount_den``.
    Candidates that are not charge balanced (an aliovalent single without an
    allowed compensation) are still returned, with ``compensation == 'none'``;
    the charge-balance rule removes them with a record.
    """
    kept = _labelled(kept[_PLACEMENT_COLUMNS])
    frames = []
    if enumeration["singles"]:
        frames.append(_singles(kept, enumeration))
    if enumeration["pairs"]:
        frames.append(_pairs(kept))
    candidates = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()
    if candidates.empty:
        return _no_candidates(dopant_fraction)
    return _finish(candidates[[c for c in _CANDIDATE_COLUMNS if c in candidates]], dopant_fraction)


_CANDIDATE_COLUMNS = (["host"] + [f"dopant_{c}" for c in _PLACEMENT_COLUMNS[1:] + _LABEL_COLUMNS]
                      + ["kind", "n_dopant", "n_codopant", "compensation"]
                      + [f"codopant_{c}" for c in _PLACEMENT_COLUMNS[1:] + _LABEL_COLUMNS])
"""Column order of a candidate table before :func:`_finish` adds its columns."""


def _labelled(placed: pd.DataFrame) -> pd.DataFrame:
    return placed.assign(kv=_kv(placed["element"], placed["site"], placed["delta"]),
                         tag=placed["ion"] + "@" + placed["site"])


def _no_candidates(dopant_fraction: Fraction) -> pd.DataFrame:
    """An empty candidate table with the columns and dtypes of a full one.

    pandas cannot infer string dtypes of empty columns, so the table is made from
    one acceptor and one donor placeholder and then emptied: the rules downstream
    see the same schema whether or not anything survived.
    """
    placeholder = _labelled(pd.DataFrame({
        "host": ["-", "-"], "site": ["Ti", "Ti"], "site_element": ["Ti", "Ti"], "site_charge": [4, 4],
        "coordination": [6, 6], "multiplicity": [1, 1], "element": ["Cr", "Nb"], "charge": [3, 5],
        "ion": ["Cr3+", "Nb5+"], "delta": [-1, 1], "radius_a": [0.615, 0.64], "radius_estimated": [False, False],
        "spin": ["", ""], "mismatch": [0.0, 0.0]}))
    options = {"singles": True, "pairs": True, "vacancy_compensation": True, "electron_compensation": True}
    frames = [_singles(placeholder, options), _pairs(placeholder)]
    return _finish(pd.concat(frames, ignore_index=True), dopant_fraction).iloc[0:0].reset_index(drop=True)


_SINGLE_CODOPANT = {"codopant_site": "", "codopant_element": "", "codopant_ion": "", "codopant_kv": "",
                    "codopant_tag": "", "codopant_charge": 0, "codopant_delta": 0, "codopant_multiplicity": 0,
                    "codopant_site_charge": 0, "codopant_coordination": 0, "codopant_mismatch": np.nan,
                    "codopant_radius_a": np.nan, "codopant_radius_estimated": False}
"""The codopant columns of a single (none); the other codopant columns stay missing (NaN)."""


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
    return singles.assign(**_SINGLE_CODOPANT)


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
    pair = c["kind"].eq("pair").to_numpy()
    c["n_dopant"] = c["n_dopant"].astype(np.int64)
    c["n_codopant"] = c["n_codopant"].astype(np.int64)

    # Dopant ions per formula unit = x * m_dopant_site; codopant = that * n_c / n_d.
    # Common denominator: x.denominator * n_dopant (times 2 for vacancies).
    m_d = c["dopant_multiplicity"].to_numpy(np.int64)
    n_d = c["n_dopant"].to_numpy(np.int64)
    n_c = c["n_codopant"].to_numpy(np.int64)
    delta_d = c["dopant_delta"].to_numpy(np.int64)
    den = np.int64(x.denominator) * n_d * 2
    c["amount_den"] = den
    c["dopant_num"] = np.int64(x.numerator) * m_d * n_d * 2
    c["codopant_num"] = np.int64(x.numerator) * m_d * n_c * 2
    compensation = c["compensation"].to_numpy(object)
    vacancy = compensation == "oxygen_vacancy"
    electrons = compensation == "electrons"
    # one V_O per two negative units: |delta| * dopant amount / 2
    c["vacancy_num"] = np.where(vacancy, np.int64(x.numerator) * m_d * n_d * -delta_d, 0)
    c["dopant_fraction"] = c["dopant_num"] / c["amount_den"] / c["dopant_multiplicity"]
    c["codopant_fraction"] = np.where(pair, c["codopant_num"] / c["amount_den"]
                                      / c["codopant_multiplicity"].where(pair, 1), 0.0)
    c["ratio"] = _ratio_texts(n_d, n_c, pair)
    c["max_ratio_count"] = np.maximum(c["n_dopant"], c["n_codopant"])

    # each kind of candidate writes its own defect set, built for its rows only
    dopant_kv = c.pop("dopant_kv").to_numpy(object)
    codopant_kv = c.pop("codopant_kv").to_numpy(object)
    defects = dopant_kv.copy()
    defects[pair] = _COUNTS[n_d[pair]] + dopant_kv[pair] + " + " + _COUNTS[n_c[pair]] + codopant_kv[pair]
    # an acceptor of |delta| = a with vacancies: the smallest neutral set is (2/g) M + (a/g) V_O, g = gcd(a, 2)
    a = -delta_d[vacancy]
    g = np.gcd(a, 2)
    defects[vacancy] = _COUNTS[2 // g] + dopant_kv[vacancy] + " + " + _COUNTS[a // g] + "V_O••"
    defects[electrons] = dopant_kv[electrons] + " + " + delta_d[electrons].astype(str).astype(object) + " e′"
    c["defects"] = pd.array(defects, dtype="str")
    suffix = np.where(pair, "+" + c.pop("codopant_tag").to_numpy(object), np.where(vacancy, "+V_O", ""))
    c["candidate_id"] = pd.array(c["host"].to_numpy(object) + "/" + c.pop("dopant_tag").to_numpy(object) + suffix,
                                 dtype="str")
    return c.sort_values("candidate_id", kind="stable").reset_index(drop=True)


def _ratio_texts(n_dopant: np.ndarray, n_codopant: np.ndarray, pair: np.ndarray) -> np.ndarray:
    """'n_d:n_c' for pairs, '' otherwise: each distinct ratio written once."""
    if len(pair) == 0:
        return np.array([], dtype=object)
    codes, inverse = np.unique(np.stack([n_dopant, n_codopant], axis=1), axis=0, return_inverse=True)
    texts = np.array([f"{d}:{c}" for d, c in codes], dtype=object)
    return np.where(pair, texts[inverse.ravel()], "")


def positions(values: pd.Series, labels) -> np.ndarray:
    """Position of each of ``values`` among ``labels``, which must hold them all.

    A hash look-up over the whole column; ``Series.map`` with a dict walks arrow
    strings one Python object at a time, and was most of the composition step.
    """
    found = pd.Index(labels).get_indexer(values)
    if np.any(found < 0):
        raise AssertionError(f"not among the labels: {sorted(set(values[found < 0]))[:5]}")
    return found.astype(np.int64)


def candidate_amounts(candidates: pd.DataFrame, hosts: dict[str, Host]) -> pd.DataFrame:
    """Atoms per formula unit (float) of each candidate: one column per element.

    Built from the host's composition with the exact substitution amounts.
    """
    elements = sorted({e for h in hosts.values() for e in h.composition()}
                      | set(candidates["dopant_element"].unique()) | (set(candidates["codopant_element"].unique()) - {""}))
    matrix = np.zeros((len(candidates), len(elements)))
    column = {e: i for i, e in enumerate(elements)}
    host_matrix = np.zeros((len(hosts), len(elements)))
    host_row = {}
    for i, (host_id, host) in enumerate(hosts.items()):
        host_row[host_id] = i
        for element, amount in host.composition().items():
            host_matrix[i, column[element]] = float(amount)
    rows = positions(candidates["host"], list(host_row))
    matrix[:] = host_matrix[rows]
    index = np.arange(len(candidates))
    den = candidates["amount_den"].to_numpy(float)
    dopant = candidates["dopant_num"].to_numpy(float) / den
    codopant = candidates["codopant_num"].to_numpy(float) / den
    vacancy = candidates["vacancy_num"].to_numpy(float) / den
    # np.add.at accumulates where a dopant replaces its own element's other site
    np.add.at(matrix, (index, positions(candidates["dopant_site_element"], elements)), -dopant)
    np.add.at(matrix, (index, positions(candidates["dopant_element"], elements)), dopant)
    pair = candidates["kind"].eq("pair").to_numpy()
    if pair.any():
        np.add.at(matrix, (index[pair], positions(candidates.loc[pair, "codopant_site_element"], elements)),
                  -codopant[pair])
        np.add.at(matrix, (index[pair], positions(candidates.loc[pair, "codopant_element"], elements)),
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
