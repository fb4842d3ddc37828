"""How two conformers of an ensemble interconvert: which torsions change, the scan of the
one that does, its barrier and rates, and the exchange summary between species.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .errors import InputError
from .geometry import _circular_difference, dihedral_angle
from .rotatable import _bond_kind, rotatable_torsions
from .thermo import check_temperatures
from .torsion_profile import BARRIER_NOTE, TorsionProfile
from .torsion_scan import scan_torsion
from .units import normalize_unit

__all__ = ["Interconversion", "torsion_changes", "interconversion", "exchange_summary"]


@dataclass(frozen=True, eq=False)
class Interconversion:
    """How two conformers of an ensemble turn into each other about one torsion.

    Attributes
    ----------
    conformers : (i, j) tuple of int
    single_torsion : bool
        False when two or more rotatable torsions differ by more than the threshold; then no
        scan is made and ``profile`` is None.
    torsion_changes : pandas.DataFrame
        Every rotatable torsion: label, atoms, angle_i, angle_j, difference (degrees).
    atoms, label : the scanned dihedral (or the largest change)
    profile : TorsionProfile or None
        The scan from conformer i.
    from_min, to_min, via_max : float, degrees
        The wells of i and j on the profile and the maximum crossed between them.
    barrier_forward, barrier_reverse : float, ``unit``
        i -> j and j -> i (NaN when both land in the same well or no scan was made).
    rates : pandas.DataFrame
        Per temperature: k_forward, k_reverse (s⁻¹), half_life_forward, half_life_reverse (s),
        exchange_regime (with ``delta_nu_hz``).
    message : str
        Plain-language summary.
    note : str
        The barrier caveat (scan energy for ΔG‡).
    """

    conformers: tuple
    single_torsion: bool
    torsion_changes: pd.DataFrame
    atoms: tuple | None
    label: str
    profile: TorsionProfile | None
    from_min: float
    to_min: float
    via_max: float
    barrier_forward: float
    barrier_reverse: float
    rates: pd.DataFrame
    unit: str
    message: str
    note: str


def torsion_changes(ens, i: int, j: int, include_terminal: bool = False) -> pd.DataFrame:
    """Circular differences of every rotatable dihedral between conformers i and j.

    Symmetry-equivalent end atoms (the two ortho carbons of a phenyl, the hydrogens of a
    methyl) are tried in turn and the smallest difference is kept.

    Returns
    -------
    pandas.DataFrame
        Columns label, bond, atoms, angle_i, angle_j, difference (degrees), sorted by
        difference, largest first.
    """
    mol = ens.mol
    pi, pj = ens.positions(i), ens.positions(j)
    rows = []
    for t in rotatable_torsions(mol, include_terminal=include_terminal):
        a_i = dihedral_angle(pi, t.atoms)
        best, a_j_best = 181.0, None
        for ii in t.equivalent_i or (t.atoms[0],):
            for ll in t.equivalent_l or (t.atoms[3],):
                a_j = dihedral_angle(pj, (ii, t.atoms[1], t.atoms[2], ll))
                d = float(_circular_difference(a_i, a_j))
                if d < best:
                    best, a_j_best = d, a_j
        rows.append({"label": t.label, "bond": t.bond, "atoms": t.atoms, "angle_i": a_i,
                     "angle_j": dihedral_angle(pj, t.atoms), "difference": best})
    df = pd.DataFrame(rows, columns=["label", "bond", "atoms", "angle_i", "angle_j", "difference"])
    return df.sort_values("difference", ascending=False, kind="stable").reset_index(drop=True)


def _default_method(ens, method):
    if method is not None:
        return method
    from .backends import available_backends
    level = str(getattr(ens, "method", "") or "").lower()
    return level if level in available_backends() else "gfn2"


def _slow_change(mol, big: pd.DataFrame):
    """The one row of ``big`` (changed torsions) that turns a slow bond (amide C-N, hindered
    biaryl axis; :func:`confpop.species.slow_bonds`), or None when there is not exactly one.

    When conformers differ in several torsions and one of them is slow, that one sets the
    rate: the others relax along a relaxed scan of it and are crossed much faster."""
    from .species import slow_bonds
    slow = {frozenset(b.atoms[1:3]) for b in slow_bonds(mol)}
    rows = [r for r in big.itertuples() if frozenset(r.atoms[1:3]) in slow]
    return rows[0] if len(rows) == 1 else None


def _barrier_caution(mol, atoms, method) -> str:
    """The amide-barrier method caution (issued as a MethodWarning) when a tight-binding
    method scanned an amide, thioamide or carbamate C-N bond; "" otherwise."""
    from .nmr.cautions import amide_barrier_caution, warn_cautions
    from .species import slow_bonds
    bond = frozenset(atoms[1:3])
    kinds = [b.kind for b in slow_bonds(mol) if frozenset(b.atoms[1:3]) == bond]
    if not kinds and _bond_kind(mol, mol.GetBondBetweenAtoms(*atoms[1:3])) == "amide":
        kinds = ["amide"]  # symmetric amides (NMe2) are no species split but still amides
    caution = amide_barrier_caution(method, kinds[0]) if kinds else None
    if caution is None:
        return ""
    warn_cautions([caution], stacklevel=4)
    return " " + caution.message


def _pair_barrier(profile: TorsionProfile, angle_a: float, angle_b: float):
    """Wells of angle_a and angle_b on the profile and the lower of the two paths between them."""
    ext = profile._extrema()
    mins = [(x, e) for x, e, m in ext if m]
    maxes = [(x, e) for x, e, m in ext if not m]
    if not mins:
        return None
    def nearest(a):
        return min(mins, key=lambda t: float(_circular_difference(t[0], a)))
    ma, mb = nearest(angle_a), nearest(angle_b)
    if ma == mb:
        return {"from_min": ma[0], "to_min": mb[0], "via_max": float("nan"),
                "barrier_forward": float("nan"), "barrier_reverse": float("nan"),
                "same_well": True}
    best = None
    arcs = [(ma[0], mb[0])] if not profile.periodic else [(ma[0], mb[0]), (mb[0], ma[0])]
    for lo, hi in arcs:
        span = np.mod(hi - lo, 360.0) if profile.periodic else hi - lo
        inside = []
        for x, e in maxes:
            off = np.mod(x - lo, 360.0) if profile.periodic else x - lo
            if (0 < off < span) if span > 0 else (span < off < 0):
                inside.append((x, e))
        if not profile.periodic and span < 0:
            inside = [(x, e) for x, e in maxes if hi < x < lo]
        if inside:
            top = max(inside, key=lambda t: t[1])
            if best is None or top[1] < best[1]:
                best = top
    if best is None:
        return None
    return {"from_min": ma[0], "to_min": mb[0], "via_max": best[0],
            "barrier_forward": best[1] - ma[1], "barrier_reverse": best[1] - mb[1],
            "same_well": False}


def _pair_rates(barrier, temperatures, unit, delta_nu_hz):
    from . import kinetics
    rows = []
    for t in temperatures:
        if barrier is None or not math.isfinite(barrier["barrier_forward"]):
            rows.append({"temperature": t, "k_forward": float("nan"), "k_reverse": float("nan"),
                         "half_life_forward": float("nan"), "half_life_reverse": float("nan"),
                         **({"exchange_regime": "same well"} if delta_nu_hz is not None else {})})
            continue
        kf = float(kinetics.eyring_rate(barrier["barrier_forward"], t, unit=unit))
        kr = float(kinetics.eyring_rate(barrier["barrier_reverse"], t, unit=unit))
        row = {"temperature": t, "k_forward": kf, "k_reverse": kr,
               "half_life_forward": math.log(2.0) / kf, "half_life_reverse": math.log(2.0) / kr}
        if delta_nu_hz is not None:
            row["exchange_regime"] = str(kinetics.exchange_regime(0.5 * (kf + kr), delta_nu_hz))
        rows.append(row)
    return pd.DataFrame(rows)


def interconversion(ens, i: int, j: int, method=None, temperatures=(298.15,), *,
                    delta_nu_hz: float | None = None, step: float = 30.0,
                    threshold: float = 60.0, convergence: str = "tight", executor=None,
                    unit: str = "kcal/mol", **backend_options) -> Interconversion:
    """Barrier and rates between two conformers that differ mainly in one torsion.

    The rotatable dihedral with the largest circular difference between conformers i and j
    is scanned (relaxed, full turn) from conformer i; the barrier is the lower of the two
    ways round the circle from i's well to j's.

    Parameters
    ----------
    ens : confpop.Ensemble
    i, j : int
        Conformer ids.
    method : str, optional
        Scan method; default the ensemble's ranking level if it is a backend name, else "gfn2".
    temperatures : float or sequence of float, K
    delta_nu_hz : float, optional
        Shift difference for the NMR exchange regime of the rates.
    step : float, degrees
    threshold : float, degrees
        If two or more torsions differ by more than this, the change is not a single-torsion
        interconversion: nothing is scanned and the torsions are reported.
    unit : str
    **backend_options
        Passed to :func:`confpop.scan_torsion`, ``store=`` included (a result store makes an
        interrupted scan resume).

    Returns
    -------
    Interconversion

    Notes
    -----
    The barrier is a scan energy standing in for ΔG‡ (typically ±1 kcal/mol at room
    temperature, a factor ~5 in k).
    """
    unit = normalize_unit(unit)
    temps = check_temperatures(temperatures)
    ids = ens.ids(active=False)
    for name, c in (("i", i), ("j", j)):
        if c not in ids:
            raise InputError(f"{name} must be a conformer id of the ensemble ({ids}), got {c}")
    if i == j:
        raise InputError(f"i and j must be two different conformers, got {i} twice")
    changes = torsion_changes(ens, i, j)
    empty_rates = _pair_rates(None, temps, unit, delta_nu_hz)
    nan = float("nan")
    if changes.empty:
        return Interconversion((i, j), False, changes, None, "", None, nan, nan, nan, nan, nan,
                               empty_rates, unit, "the molecule has no rotatable torsion", "")
    big = changes[changes["difference"] > threshold]
    top = changes.iloc[0]
    relaxing = ""
    if len(big) >= 2:
        listing = ", ".join(f"{r.label} ({r.difference:.0f} deg)" for r in big.itertuples())
        slow = _slow_change(ens.mol, big)
        if slow is None:
            msg = (f"conformers {i} and {j} differ in {len(big)} torsions by more than "
                   f"{threshold:g} degrees ({listing}) and not in exactly one slow bond "
                   "(amide C-N, hindered biaryl axis): not a single-torsion interconversion")
            return Interconversion((i, j), False, changes, tuple(top["atoms"]), top["label"],
                                   None, nan, nan, nan, nan, nan, empty_rates, unit, msg, "")
        # the slow bond sets the rate; the other torsions relax along its relaxed scan
        top = changes[changes["label"] == slow.label].iloc[0]
        relaxing = (f"; conformers {i} and {j} also differ in "
                    + ", ".join(r.label for r in big.itertuples() if r.label != slow.label)
                    + ", which relax along the scan of the slow bond")
    method = _default_method(ens, method)
    profile = scan_torsion(ens.mol, tuple(top["atoms"]), method=method,
                           solvent=getattr(ens, "solvent", None), step=step, conf_id=i,
                           convergence=convergence, executor=executor, unit=unit,
                           charge=getattr(ens, "charge", None),
                           multiplicity=getattr(ens, "multiplicity", None), **backend_options)
    pb = _pair_barrier(profile, profile.start_angle, top["angle_j"])
    rates = _pair_rates(pb, temps, unit, delta_nu_hz)
    if pb is None:
        msg = f"the scan of {top['label']} shows no barrier between the wells"
        pb = {"from_min": nan, "to_min": nan, "via_max": nan, "barrier_forward": nan,
              "barrier_reverse": nan}
    elif pb["same_well"]:
        msg = (f"conformers {i} and {j} fall into the same well of {top['label']} on the "
               f"{method} scan (largest change {top['difference']:.0f} deg)")
    else:
        msg = (f"{top['label']}: {i} -> {j} over {pb['barrier_forward']:.2f} {unit} "
               f"(reverse {pb['barrier_reverse']:.2f}) via {pb['via_max']:.0f} deg")
    msg += relaxing
    caution = _barrier_caution(ens.mol, tuple(top["atoms"]), method)
    return Interconversion((i, j), True, changes, tuple(top["atoms"]), top["label"], profile,
                           pb["from_min"], pb["to_min"], pb["via_max"], pb["barrier_forward"],
                           pb["barrier_reverse"], rates, unit, msg, profile.note + caution)


def _exchange_rows(pair, pb, temps, unit, delta_nu_hz, method, slow_note) -> list[dict]:
    """One row per temperature for a conformer pair with barrier record ``pb``."""
    from . import kinetics

    rows = []
    for t in temps:
        row = {**pair, "temperature": t}
        if pb is None or pb["same_well"]:
            row.update(barrier_ab=float("nan"), barrier_ba=float("nan"),
                       k_ab=float("nan"), k_ba=float("nan"), k_exchange=float("nan"),
                       regime="same well",
                       note=f"the {method} scan puts both conformers in one well")
        else:
            kab = float(kinetics.eyring_rate(pb["barrier_forward"], t, unit=unit))
            kba = float(kinetics.eyring_rate(pb["barrier_reverse"], t, unit=unit))
            row.update(barrier_ab=pb["barrier_forward"], barrier_ba=pb["barrier_reverse"],
                       k_ab=kab, k_ba=kba, k_exchange=kab + kba,
                       regime=str(kinetics.exchange_regime(0.5 * (kab + kba), delta_nu_hz)),
                       note=slow_note)
        rows.append(row)
    return rows


def exchange_summary(ens, temperatures, *, delta_nu_hz: float, method=None,
                     step: float = 30.0, threshold: float = 60.0, convergence: str = "tight",
                     executor=None, unit: str = "kcal/mol", **backend_options) -> pd.DataFrame:
    """For every pair of conformers that differ in one torsion: do they average on the NMR time scale?

    Each such torsion is scanned once from the lower-energy conformer of the pair (scans are
    reused between pairs that share torsion and starting conformer). Pairs that differ in
    several torsions of which exactly one is a slow bond (amide C-N, hindered biaryl axis;
    :mod:`confpop.species`) are handled through that bond: it is scanned once per species
    from the species' lowest conformer, the other torsions relaxing along the scan.

    Parameters
    ----------
    ens : confpop.Ensemble
    temperatures : float or sequence of float, K
    delta_nu_hz : float
        Shift difference (Hz) of the exchanging sites; the mean directional rate
        (k_ab + k_ba) / 2 is compared with the coalescence rate by
        :func:`confpop.kinetics.exchange_regime`.
    method, step, threshold, convergence, executor, unit
        As for :func:`interconversion`.

    Returns
    -------
    pandas.DataFrame
        One row per pair and temperature: conformer_a, conformer_b, torsion, atoms,
        temperature, barrier_ab, barrier_ba (``unit``), k_ab, k_ba, k_exchange (s⁻¹),
        regime ("fast", "intermediate", "slow"; "same well" when the scan joins them), note.
        ``attrs["note"]`` holds the barrier caveat; ``attrs["skipped"]`` the pairs that
        differ in more than one torsion and not in exactly one slow bond, as (a, b, torsion
        labels, reason).
    """
    unit = normalize_unit(unit)
    temps = check_temperatures(temperatures)
    method = _default_method(ens, method)
    ids = ens.ids()
    try:
        order = ens.energies(unit=unit)
        rank = {int(c): float(order.loc[c]) for c in order.index}
    except Exception:  # ensembles without energies: keep id order
        rank = {c: float(c) for c in ids}
    from .species import species_table
    species = species_table(ens, ids=ids)["species"].to_dict()
    scans: dict = {}
    rows, skipped = [], []
    note = ""
    for a_pos, a in enumerate(ids):
        for b in ids[a_pos + 1:]:
            changes = torsion_changes(ens, a, b)
            big = changes[changes["difference"] > threshold]
            via_slow = False
            if len(big) > 1:
                slow = _slow_change(ens.mol, big)
                if slow is None:
                    reason = ("same species: several fast torsions (fast by bond class)"
                              if species[a] == species[b] else
                              "several slow bonds differ: scan each with scan_torsion")
                    skipped.append((a, b, list(big["label"]), reason))
                    continue
                big = big[big["label"] == slow.label]
                via_slow = True
            if len(big) != 1:
                continue
            first, second = (a, b) if rank.get(a, a) <= rank.get(b, b) else (b, a)
            a_starts = first == a
            tors = big.iloc[0]
            if via_slow:
                # one scan per slow bond and species, from the species' lowest conformer
                same = [c for c in ids if species[c] == species[first]]
                first = min(same, key=lambda c: rank.get(c, c))
                if species[a] != species[b]:
                    a_starts = species[a] == species[first]
            key = (tuple(tors["atoms"]), first)
            if key not in scans:
                scans[key] = scan_torsion(ens.mol, tuple(tors["atoms"]), method=method,
                                          solvent=getattr(ens, "solvent", None), step=step,
                                          conf_id=first, convergence=convergence,
                                          executor=executor, unit=unit,
                                          charge=getattr(ens, "charge", None),
                                          multiplicity=getattr(ens, "multiplicity", None),
                                          **backend_options)
            prof = scans[key]
            note = prof.note
            target = dihedral_angle(ens.positions(second), tors["atoms"])
            pb = _pair_barrier(prof, prof.start_angle, target)
            if pb is not None and not a_starts:  # report a -> b
                pb = {**pb, "barrier_forward": pb["barrier_reverse"],
                      "barrier_reverse": pb["barrier_forward"]}
            pair = {"conformer_a": a, "conformer_b": b, "species_a": species[a],
                    "species_b": species[b], "torsion": tors["label"],
                    "atoms": tuple(tors["atoms"])}
            slow_note = (f"slow bond scanned from conformer {first}; the other changed "
                         "torsions relax along it" if via_slow else "")
            rows.extend(_exchange_rows(pair, pb, temps, unit, delta_nu_hz, method, slow_note))
    cols = ["conformer_a", "conformer_b", "species_a", "species_b", "torsion", "atoms",
            "temperature", "barrier_ab", "barrier_ba", "k_ab", "k_ba", "k_exchange", "regime",
            "note"]
    out = pd.DataFrame(rows, columns=cols)
    note = note or BARRIER_NOTE.format(kind="relaxed", method=method, extra="")
    for atoms in dict.fromkeys(k[0] for k in scans):
        caution = _barrier_caution(ens.mol, atoms, method)
        if caution and caution not in note:
            note += caution
    out.attrs["note"] = note
    out.attrs["skipped"] = skipped
    return out
