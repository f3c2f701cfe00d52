"""In-gap state risk of a dopant from its d-electron count, its site's coordination and its compensation.

Method
------
Crystal-field (ligand-field) occupation, as taught in inorganic chemistry textbooks (e.g. Shriver & Atkins,
Inorganic Chemistry, chapters on d-metal complexes; Cotton & Wilkinson, Advanced Inorganic Chemistry --
both from memory):

* d-electron count of a d-block ion = group number - oxidation state (Ti4+ d0, Cr3+ d3, Fe3+ d5,
  Rh3+ d6, Cu2+ d9, Zn2+ d10).  Post-transition-metal ions of periods 4-6 (Ga3+, Sn4+, Sb5+, Bi3+ ...)
  keep a filled (n-1)d10 shell; s-block ions and light p-block ions have no d electrons; lanthanide and
  actinide ions are counted in their f shell (4f: Z - 54 - charge; 5f: Z - 86 - charge).
* Octahedral sites (coordination 6) split d into t2g (3 orbitals, lower) and eg (2, upper); tetrahedral
  sites (coordination 4) into e (2, lower) and t2 (3, upper), with a splitting so small (about 4/9 of the
  octahedral one) that tetrahedral ions are high spin.  In oxides 3d ions are high spin and 4d/5d ions low
  spin (larger splitting, smaller pairing energy; common practice, as for the Shannon radii).
* High spin fills each set with one spin first (Hund's rule), low spin fills the lower set completely
  before the upper one.

The rule of this module, per ion, with the electrons placed in spin-resolved sets:

* ``high``: a set is partly filled within one spin (for example Rh4+ d5 low spin, t2g with 5 of 6;
  Cr4+ d2, t2g-up 2 of 3; Fe4+ d4 high spin, eg-up 1 of 2; Cu2+ d9).  The empty orbitals of that set lie
  at the energy of the occupied ones, i.e. in the gap where the occupied dopant level is: an empty trap
  next to every photo-excited hole, the classic recombination centre.
* ``medium``: no set is partly filled within one spin, but a set is open once both spins are counted
  (Cr3+ d3 octahedral, t2g-up full and t2g-down empty; Fe3+ and Mn2+ d5 high spin; Ni2+ d8 octahedral).
  The nearest empty d states lie above the occupied ones by the spin-pairing (exchange) energy, a few
  tenths to about 2 eV: whether they fall in the gap or in the conduction band depends on the host.
  Also ``medium``: an open 4f/5f shell (localised f states, not covered by the d rule); a d0 ion of the 3d
  series beyond Ti (V5+, Cr6+, Mn7+), whose empty 3d states lie low because of its high charge (Cr6+ is
  named as the recombination centre of singly Cr-doped SrTiO3 and TiO2 by Kato & Kudo, J. Phys. Chem. B 106
  (2002) 5029, from memory); and any d ion at a site other than octahedral or tetrahedral (no scheme here).
* ``low``: every set is full or empty with both spins: d0 (other than the above), d10, low-spin d6
  octahedral (t2g6, Rh3+), ions without d electrons.

Compensation decides the charge the ion keeps, and so its count:

* held by a codopant (``compensation = codopant``) or isovalent: the enumerated charge.
* an acceptor compensated by oxygen vacancies (or not at all): the vacancies can be filled by oxidation
  when the oxide is fired in air, pushing the acceptor to the site's valence (Rh3+ -> Rh4+ in SrTiO3 without
  a codopant: Konta et al., J. Phys. Chem. B 108 (2004) 8992, from memory).  The risk is the worse of the
  two charges, and at least ``medium`` for the vacancies themselves (common practice: oxygen vacancies in
  titanates leave reduced Ti3+ d1 centres).
* a donor compensated by electrons: the electrons reduce the host's d0 cations (Ti4+ -> Ti3+ d1, a partly
  filled t2g): ``high`` when the host has a d0 transition-metal cation, else ``medium`` (free carriers).

A pair's risk is the worse of its two ions.  The rule ranks; it does not remove candidates.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from screening import ions
from screening.errors import ScreeningError

RISKS = ("low", "medium", "high")
_ORDER = {risk: i for i, risk in enumerate(RISKS)}
_UP, _DOWN = "\u2191", "\u2193"

OCTAHEDRAL, TETRAHEDRAL = 6, 4
# (set name, spin, capacity) in filling order; from the crystal-field diagrams of the textbooks above
_FILLING = {
    (OCTAHEDRAL, "high"): [("t2g", _UP, 3), ("eg", _UP, 2), ("t2g", _DOWN, 3), ("eg", _DOWN, 2)],
    (OCTAHEDRAL, "low"): [("t2g", _UP, 3), ("t2g", _DOWN, 3), ("eg", _UP, 2), ("eg", _DOWN, 2)],
    (TETRAHEDRAL, "high"): [("e", _UP, 2), ("t2", _UP, 3), ("e", _DOWN, 2), ("t2", _DOWN, 3)],
}
_HIGH_CHARGE_3D_D0 = {"V", "Cr", "Mn"}


def _group_of_d_block(z: int) -> int | None:
    if 21 <= z <= 30:
        return z - 18
    if 39 <= z <= 48:
        return z - 36
    if z in (57, 89):  # La, Ac: group 3
        return 3
    if 72 <= z <= 80:
        return z - 68
    if 104 <= z <= 112:
        return z - 100
    return None


def electron_count(element: str, charge: int) -> tuple[str, int]:
    """(shell, electrons) of an ion: ('d', n), ('f', n), or ('none', 0) for ions without d or f electrons.

    Raises ScreeningError for an ion whose count falls outside the shell (e.g. Ti5+).
    """
    row = ions.element_row(element)
    z = int(row["atomic_number"])
    group = _group_of_d_block(z)
    if group is not None:
        count = group - int(charge)
        if count < 0 or count > 10:
            raise ScreeningError(f"{element}{charge:+d} would have {count} d electrons (group {group})",
                                 field="charge")
        return "d", count
    for first, core in ((58, 54), (90, 86)):  # lanthanides Ce-Lu after [Xe], actinides Th-Lr after [Rn]
        if first <= z <= first + 13:
            count = z - core - int(charge)
            if count < 0 or count > 14:
                raise ScreeningError(f"{element}{charge:+d} would have {count} f electrons", field="charge")
            return "f", count
    if row["block"] == "p" and int(row["period"]) >= 4:
        return "d", 10
    return "none", 0


def spin_for_period(period: int) -> str:
    """High spin for 3d ions, low spin for 4d and 5d ions in oxides (common practice)."""
    return "high" if int(period) <= 4 else "low"


def occupation(d_count: int, coordination: int, spin: str) -> list[tuple[str, str, int, int]]:
    """Spin-resolved filling: list of (set, spin, electrons, capacity); tetrahedral is always high spin."""
    if coordination == TETRAHEDRAL:
        spin = "high"
    scheme = _FILLING.get((int(coordination), spin))
    if scheme is None:
        raise ScreeningError(f"no crystal-field scheme for coordination {coordination}", field="coordination")
    left, filled = int(d_count), []
    for name, arrow, capacity in scheme:
        n = min(left, capacity)
        filled.append((name, arrow, n, capacity))
        left -= n
    return filled


def _configuration(filled) -> str:
    parts = [f"{name}{arrow}{n}" for name, arrow, n, _ in filled if n]
    return " ".join(parts) if parts else "empty"


def ion_risk(element: str, charge: int, coordination: int) -> tuple[str, str]:
    """(risk, reason) of one ion at one site, by the rule of the module docstring."""
    label = f"{element}{abs(charge) if abs(charge) != 1 else ''}{'+' if charge > 0 else '-'}"
    shell, count = electron_count(element, charge)
    if shell == "none":
        return "low", f"{label}: no d electrons"
    if shell == "f":
        if 0 < count < 14:
            return "medium", f"{label}: open 4f/5f shell (f{count}), localised f states may lie in the gap"
        return "low", f"{label}: f{count}, closed f shell"
    if count == 10:
        return "low", f"{label}: d10, filled d shell"
    if count == 0:
        row = ions.element_row(element)
        if element in _HIGH_CHARGE_3D_D0 and int(row["period"]) == 4:
            return "medium", f"{label}: d0, empty 3d states of a highly charged 3d ion lie low in the gap"
        return "low", f"{label}: d0, empty d shell"
    period = int(ions.element_row(element)["period"])
    spin = spin_for_period(period)
    if int(coordination) not in (OCTAHEDRAL, TETRAHEDRAL):
        return "medium", f"{label}: d{count} at a {int(coordination)}-fold site, no crystal-field scheme applied"
    filled = occupation(count, int(coordination), spin)
    geometry = "octahedral" if int(coordination) == OCTAHEDRAL else "tetrahedral"
    spin_text = "high spin" if int(coordination) == TETRAHEDRAL or spin == "high" else "low spin"
    config = f"{label} d{count} {geometry} {spin_text}, {_configuration(filled)}"
    partly = [(name, arrow, n, cap) for name, arrow, n, cap in filled if 0 < n < cap]
    if partly:
        name, arrow, n, cap = partly[0]
        return "high", f"{config}: {name}{arrow} {n} of {cap} filled, empty states at the occupied level"
    totals: dict[str, list[int]] = {}
    for name, _, n, cap in filled:
        totals.setdefault(name, [0, 0])
        totals[name][0] += n
        totals[name][1] += cap
    if any(0 < n < cap for n, cap in totals.values()):
        return "medium", f"{config}: closed spin subshells, empty d states one exchange splitting higher"
    return "low", f"{config}: every d set full or empty"


def _worse(a: tuple[str, str], b: tuple[str, str]) -> tuple[str, str]:
    return a if _ORDER[a[0]] >= _ORDER[b[0]] else b


def _known_states() -> set[tuple[str, int]]:
    states = ions.load_ion_data().states
    return set(zip(states["element"], states["charge"].astype(int)))


def dopant_risk(element: str, charge: int, site_charge: int, coordination: int, compensation: str,
                host_has_d0_cation: bool, known_states=None) -> tuple[str, str]:
    """Risk of one dopant as compensated; see the module docstring for the compensation cases."""
    risk = ion_risk(element, int(charge), int(coordination))
    if compensation in ("oxygen_vacancy", "none") and charge < site_charge:
        known = known_states if known_states is not None else _known_states()
        shell, count = electron_count(element, int(charge))
        # only an ion with d electrons to give up can be oxidised to the site's valence, and only to a state it has
        if shell == "d" and 0 < count < 10 and (element, int(site_charge)) in known \
                and _group_of_d_block(int(ions.element_row(element)["atomic_number"])) is not None:
            oxidised = ion_risk(element, int(site_charge), int(coordination))
            oxidised = (oxidised[0], "without a codopant it can oxidise to the site valence: " + oxidised[1])
            risk = _worse(risk, oxidised)
        if compensation == "oxygen_vacancy":
            risk = _worse(risk, ("medium", "oxygen vacancies (reduced host cations nearby)"))
            if risk[1] != "oxygen vacancies (reduced host cations nearby)":
                risk = (risk[0], risk[1] + "; plus oxygen vacancies")
    if compensation == "electrons":
        electrons = ("high", "electron compensation reduces the host's d0 cations (e.g. Ti3+ d1)") \
            if host_has_d0_cation else ("medium", "electron compensation: free carriers")
        risk = _worse(risk, electrons)
    return risk


def host_has_d0_cation(host) -> bool:
    """Whether a host (screening.hosts.Host) has a d-block cation in a d0 state (Ti4+, Nb5+, Ta5+, W6+)."""
    for site in host.sites:
        shell, count = electron_count(site.element, site.oxidation_state)
        z = int(ions.element_row(site.element)["atomic_number"])
        if shell == "d" and count == 0 and _group_of_d_block(z) is not None:
            return True
    return False


def candidate_risk(candidates: pd.DataFrame, hosts: dict) -> pd.DataFrame:
    """ingap_risk and ingap_reason of each candidate (same index); hosts: id -> screening.hosts.Host."""
    if len(candidates) == 0:
        return pd.DataFrame({"ingap_risk": np.array([], str), "ingap_reason": np.array([], str)})
    known = _known_states()
    d0 = {h: host_has_d0_cation(host) for h, host in hosts.items()}
    pair = candidates["kind"].eq("pair").to_numpy()
    per_role = []
    for role in ("dopant", "codopant"):
        cols = ["host", f"{role}_element", f"{role}_charge", f"{role}_site_charge", f"{role}_coordination",
                "compensation"]
        block = candidates.loc[pair if role == "codopant" else np.ones(len(candidates), bool), cols]
        distinct = block.drop_duplicates()
        values = {tuple(row): dopant_risk(row[1], int(row[2]), int(row[3]), int(row[4]), row[5], d0[row[0]], known)
                  for row in distinct.itertuples(index=False)}
        keys = list(block.itertuples(index=False, name=None))
        risk = pd.Series([values[k] for k in keys], index=block.index, dtype=object)
        per_role.append(risk.reindex(candidates.index))
    dop, cod = per_role
    out_risk, out_reason = [], []
    for a, b in zip(dop, cod):
        if isinstance(b, tuple):
            worst = _worse(a, b)
            out_risk.append(worst[0])
            out_reason.append(f"{a[1]} | {b[1]}")
        else:
            out_risk.append(a[0])
            out_reason.append(a[1])
    return pd.DataFrame({"ingap_risk": out_risk, "ingap_reason": out_reason}, index=candidates.index)


def risk_penalty(risk) -> np.ndarray:
    """Ranking term: 0 for low, -0.5 for medium, -1 for high."""
    values = pd.Series(risk, dtype=object)
    unknown = ~values.isin(RISKS)
    if unknown.any():
        raise ScreeningError(f"in-gap risk {values[unknown].iloc[0]!r} is not one of {', '.join(RISKS)}",
                             field="ingap_risk")
    return -values.map(_ORDER).to_numpy(float) / 2.0
