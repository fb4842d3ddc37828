"""Conformer generation with ETKDG, in rounds until sampling saturates.

Each round embeds a batch of trial structures (ETKDGv3, seeded), relaxes them with a force
field and matches them against the conformers already found. Sampling stops when a round
adds no new conformer inside the energy window. How often each unique conformer was found
again gives a Good–Turing estimate of the share of the (energy-window) population that
sampling has not seen yet: n₁/N, with n₁ the number of conformers found exactly once and N
the number of trial structures that ended inside the window.

References
----------
Riniker & Landrum, J. Chem. Inf. Model. 2015, 55, 2562 (ETKDG), doi:10.1021/acs.jcim.5b00654
Wang, Witek, Landrum, Riniker, J. Chem. Inf. Model. 2020, 60, 2044 (ETKDGv3, macrocycles),
doi:10.1021/acs.jcim.0c00025
Good, Biometrika 1953, 40, 237 (unseen species), doi:10.1093/biomet/40.3-4.237
Ebejer, Morris, Deane, J. Chem. Inf. Model. 2012, 52, 1146 (trial counts by rotatable
bonds), doi:10.1021/ci2004658
"""

from __future__ import annotations

import logging
import time
from dataclasses import dataclass, field

import numpy as np
from rdkit import Chem
from rdkit.Chem import rdDistGeom
from rdkit.Chem import rdMolDescriptors

from .backends.forcefield import minimize_conformers
from .errors import InputError
from .prune import PruneSettings, find_duplicates, integrity_problems
from .units import convert

__all__ = ["SamplingReport", "default_trials", "embed", "round_seed", "distinct_structures", "sample_conformers", "flexibility"]

log = logging.getLogger(__name__)


#: trial structures embedded before the first round; if none embeds, the search stops
PROBE_TRIALS = 3


def flexibility(mol: Chem.Mol) -> dict:
    """Rotatable bonds (strict definition) and ring sizes of ``mol``."""
    ring_sizes = sorted(len(r) for r in mol.GetRingInfo().AtomRings())
    return {"rotatable_bonds": int(rdMolDescriptors.CalcNumRotatableBonds(
                mol, rdMolDescriptors.NumRotatableBondsOptions.Strict)),
            "ring_sizes": ring_sizes,
            "macrocycle": any(s >= 8 for s in ring_sizes)}


def default_trials(mol: Chem.Mol) -> int:
    """Trial structures per sampling round, from the molecule's flexibility.

    50 for up to 7 rotatable bonds, 200 for 8-12, 300 above (Ebejer et al. 2012), doubled
    for macrocycles and raised for flexible (non-aromatic) rings of 6-7 atoms, never below 20.
    """
    flex = flexibility(mol)
    n_rot = flex["rotatable_bonds"]
    n = 50 if n_rot <= 7 else (200 if n_rot <= 12 else 300)
    n = max(20, min(n, 20 + 15 * n_rot + 10 * len(flex["ring_sizes"])))
    if flex["macrocycle"]:
        n *= 2
    return int(n)


def _params(mol: Chem.Mol, seed: int, threads: int, force_trans_amides: bool):
    params = rdDistGeom.ETKDGv3()
    params.randomSeed = int(seed)
    params.numThreads = int(threads)
    params.pruneRmsThresh = -1.0
    params.enforceChirality = True
    params.forceTransAmides = bool(force_trans_amides)
    params.trackFailures = True
    if flexibility(mol)["macrocycle"]:
        params.useMacrocycleTorsions = True
        params.useMacrocycle14config = True
    return params


# RDKit's ETKDG draws from a multiplicative generator modulo 2**31 - 1: a seed of 0 or of
# 2**31 - 1 is a fixed point (every trial of the round is the same structure; measured with
# RDKit 2026.09: 1 distinct structure of 20 for both, 20 of 20 for 300 random seeds in
# between), -1 means "random" and anything >= 2**31 raises OverflowError.
_SEED_MODULUS = 2**31 - 1


def round_seed(seed: int, round_index: int) -> int:
    """ETKDG seed of sampling round ``round_index`` (0-based) of a search with ``seed``.

    Any integer ``seed`` (0, negative, >= 2**31) maps to a valid RDKit seed in
    [1, 2**31 - 2]; different rounds and different user seeds give different RDKit seeds
    (a hash of both through :class:`numpy.random.SeedSequence`), and the same pair always
    gives the same one.

    Examples
    --------
    >>> round_seed(0, 0) != 0 and round_seed(0, 0) != round_seed(0, 1)
    True
    >>> 1 <= round_seed(-5, 3) <= 2**31 - 2 and 1 <= round_seed(2**40, 2) <= 2**31 - 2
    True
    """
    if isinstance(seed, bool) or not float(seed).is_integer():
        raise InputError(f"seed must be an integer, got {seed!r}")
    seed, round_index = int(seed), int(round_index)
    if round_index < 0:
        raise InputError(f"round_index must be >= 0, got {round_index}")
    # SeedSequence takes non-negative integers of any size: sign and magnitude separately
    entropy = [0x636F6E66, int(seed < 0), abs(seed), round_index]
    word = int(np.random.SeedSequence(entropy).generate_state(1, dtype=np.uint64)[0])
    return 1 + word % (_SEED_MODULUS - 1)


def distinct_structures(mol: Chem.Mol, decimals: int = 4) -> list[int]:
    """Ids of the conformers of ``mol`` whose coordinates (rounded to ``decimals`` Å) are
    not an exact repeat of an earlier conformer's.

    An embedding that returns the same structure twice has not sampled twice: repeats of
    this kind must not count as "found again" in the completeness estimate.
    """
    seen, keep = set(), []
    for conf in mol.GetConformers():
        key = np.round(np.asarray(conf.GetPositions()), decimals).tobytes()
        if key not in seen:
            seen.add(key)
            keep.append(conf.GetId())
    return keep


def _tally(counts) -> tuple[int, int]:
    """(N, n1): structures inside the window and conformers seen exactly once."""
    counts = list(counts)
    return int(sum(counts)), int(sum(1 for c in counts if c == 1))


def embed(mol: Chem.Mol, n: int, seed: int = 0, threads: int = 0,
          force_trans_amides: bool = True, round_index: int = 0) -> tuple[Chem.Mol, int]:
    """Embed ``n`` trial structures with ETKDGv3.

    ``seed`` is any integer; RDKit receives :func:`round_seed` (seed, round_index), never
    the raw value.

    Returns
    -------
    mol : Chem.Mol
        A copy with the embedded conformers (ids 0..m-1).
    failures : int
        Trials that did not give a structure (n - m).
    """
    if n < 1:
        raise InputError(f"n_trials must be >= 1, got {n}")
    work = Chem.Mol(mol)
    work.RemoveAllConformers()
    params = _params(work, round_seed(seed, round_index), threads, force_trans_amides)
    from .backends.forcefield import _QuietRDKit
    with _QuietRDKit():  # ETKDG's UFF typer logs C++ warnings for metals and SF6-like atoms
        ids = rdDistGeom.EmbedMultipleConfs(work, numConfs=int(n), params=params)
        if len(ids) == 0:
            params.useRandomCoords = True
            ids = rdDistGeom.EmbedMultipleConfs(work, numConfs=int(n), params=params)
    return work, int(n) - len(ids)


@dataclass
class SamplingReport:
    """What the sampling rounds did.

    Attributes
    ----------
    rounds : int
    trials : int
        Trial structures asked for in all rounds.
    embedding_failures : int
        Trials for which ETKDG gave no structure.
    relaxation_failures : int
        Relaxed structures discarded because the relaxation failed or broke a bond (GFN-FF).
    repeated_embeddings : int
        Trial structures identical to another trial of the same round (dropped before
        relaxation; they never count as a conformer found again).
    minimization_unconverged : int
        Relaxations that hit the iteration limit (kept, flagged).
    in_window : int
        Relaxed structures inside the energy window (N of the Good–Turing estimate).
    unique : int
        Distinct conformers inside the window.
    found_once : int
        Distinct conformers seen exactly once (n₁).
    unseen_share : float
        Good–Turing estimate n₁/N of the probability that the next trial finds a new
        conformer; 1 - unseen_share is the completeness estimate.
    new_per_round : list of int
    saturated : bool
        A round found nothing new or the completeness target was reached (rather than
        stopping at max_rounds).
    """

    rounds: int = 0
    trials: int = 0
    embedding_failures: int = 0
    repeated_embeddings: int = 0
    relaxation_failures: int = 0
    minimization_unconverged: int = 0
    in_window: int = 0
    unique: int = 0
    found_once: int = 0
    unseen_share: float = 1.0
    new_per_round: list = field(default_factory=list)
    saturated: bool = False

    @property
    def completeness(self) -> float:
        return 1.0 - self.unseen_share

    def as_dict(self) -> dict:
        d = {k: getattr(self, k) for k in self.__dataclass_fields__}
        d["completeness"] = self.completeness
        return d


def sample_conformers(mol: Chem.Mol, *, n_trials: int | None = None, seed: int = 0,
                      method: str = "mmff94s", energy_window: float = 15.0,
                      prune: PruneSettings | None = None, max_rounds: int = 5,
                      threads: int = 0, force_trans_amides: bool = True,
                      max_iterations: int = 2000, target_completeness: float | None = None):
    """Sample and force-field relax conformers until sampling saturates.

    Rounds stop when a round adds no new conformer, when the Good–Turing completeness
    estimate reaches ``target_completeness``, or after ``max_rounds``.

    Parameters
    ----------
    mol : Chem.Mol
        Checked molecule with explicit hydrogens (see :func:`confpop.load_molecule`).
    n_trials : int, optional
        Trial structures per round (default :func:`default_trials`).
    seed : int
        Any integer; round r uses the RDKit seed :func:`round_seed` (seed, r), so the same
        seed gives the same ensemble and no round repeats another.
    method : {"mmff94s", "mmff94", "uff", "gfnff"}
        Force field for the relaxation.
    energy_window : float, kcal/mol
        Conformers more than this above the lowest are not kept.
    prune : PruneSettings
        Duplicate criteria (defaults: :class:`confpop.prune.PruneSettings`).
    max_rounds : int
        Upper bound on rounds when sampling does not saturate.
    target_completeness : float, optional
        Stop once 1 - n₁/N reaches this value (e.g. 0.9: a further trial finds a new
        conformer with probability <= 10 %). None: only the two other rules.

    Returns
    -------
    mol : Chem.Mol
        The distinct conformers (ids 0..k-1, lowest energy first).
    energies : (k,) array, hartree
        Force-field energies.
    times_found : (k,) int array
    chiral_conformer : (k,) bool array
        Whether each conformer differs from its mirror image (achiral molecules only).
    report : SamplingReport
    """
    prune = prune or PruneSettings()
    n_trials = default_trials(mol) if n_trials is None else int(n_trials)
    if n_trials < 1:
        raise InputError(f"n_trials must be >= 1, got {n_trials}")
    if energy_window <= 0:
        raise InputError(f"energy_window must be > 0 kcal/mol, got {energy_window}")
    if max_rounds < 1:
        raise InputError(f"max_rounds must be >= 1, got {max_rounds}")
    if target_completeness is not None and not 0.0 < target_completeness < 1.0:
        raise InputError("target_completeness must lie between 0 and 1 (exclusive), "
                         f"got {target_completeness}")
    report = SamplingReport()
    pool_pos: list[np.ndarray] = []
    pool_e: list[float] = []
    kept_idx: list[int] = []
    counts: dict[int, int] = {}
    chiral: dict[int, bool] = {}
    window_h = convert(energy_window, "kcal/mol", "hartree")
    from .prune import is_achiral
    achiral = is_achiral(mol)
    # A probe of a few trial structures first: a molecule that distance geometry cannot embed
    # at all (C60: ~25 s per failed trial here) is refused in about a minute, not after a
    # round of n_trials failures.
    t0 = time.perf_counter()
    probe, _ = embed(mol, min(PROBE_TRIALS, n_trials), seed=seed, round_index=max_rounds,
                     threads=threads, force_trans_amides=force_trans_amides)
    if probe.GetNumConformers() == 0:
        raise InputError(
            f"no conformer could be embedded: ETKDG failed on all {min(PROBE_TRIALS, n_trials)} "
            f"probe trial structures, also from random coordinates "
            f"({time.perf_counter() - t0:.0f} s); the molecule is likely too strained or caged "
            "for distance geometry, on which this sampling rests")
    for rnd in range(max_rounds):
        t0 = time.perf_counter()
        trial, failed = embed(mol, n_trials, seed=seed, round_index=rnd, threads=threads,
                              force_trans_amides=force_trans_amides)
        report.rounds += 1
        report.trials += n_trials
        report.embedding_failures += failed
        if trial.GetNumConformers() == 0:
            if not kept_idx:  # every trial failed and nothing was ever embedded: more rounds
                break         # of the same would only repeat that (C60 took 30 s a round)
            continue
        distinct = distinct_structures(trial)
        report.repeated_embeddings += trial.GetNumConformers() - len(distinct)
        if len(distinct) < trial.GetNumConformers():
            kept = Chem.Mol(trial)
            kept.RemoveAllConformers()
            for cid in distinct:
                kept.AddConformer(Chem.Conformer(trial.GetConformer(cid)), assignId=True)
            trial = kept
        relaxed, results = minimize_conformers(trial, method=method, threads=threads,
                                               max_iterations=max_iterations)
        report.minimization_unconverged += sum(1 for ok, _ in results if not ok)
        start = len(pool_pos)
        if not any(np.isfinite(e) for _, e in results):
            report.new_per_round.append(0)
            continue
        for conf, (_, energy) in zip(relaxed.GetConformers(), results):
            if not np.isfinite(energy):  # the relaxation failed (GFN-FF only)
                report.relaxation_failures += 1
                continue
            # RDKit's force fields keep the bonds they are given; GFN-FF relaxes from the
            # geometry and can break an ETKDG structure of a hypervalent or metal centre
            # (SF6 from ETKDG: S-F 1.0 and 3.1 A, the lowest GFN-FF energy of 40 trials)
            if method == "gfnff" and integrity_problems(relaxed, conf.GetId()):
                report.relaxation_failures += 1
                continue
            pool_pos.append(np.array(conf.GetPositions()))
            pool_e.append(energy)
        local = kept_idx + list(range(start, len(pool_pos)))
        rep = find_duplicates(mol, [pool_pos[i] for i in local], [pool_e[i] for i in local],
                              prune, achiral=achiral)
        # carry the counts of earlier rounds over to whichever copy is kept now
        absorbed: dict[int, int] = {}
        for dup, ref in rep.duplicate_of.items():
            absorbed.setdefault(ref, []).append(local[dup])
        e_min = min(pool_e[local[u]] for u in rep.unique)
        new_counts: dict[int, int] = {}
        new_chiral: dict[int, bool] = {}
        n_new = 0
        for u in rep.unique:
            pool_i = local[u]
            if pool_e[pool_i] - e_min > window_h:
                continue
            members = [pool_i] + absorbed.get(u, [])
            new_counts[pool_i] = sum(counts.get(m, 1) for m in members)
            new_chiral[pool_i] = rep.chiral_conformer[u]
            if not any(m in counts for m in members):
                n_new += 1
        kept_idx = sorted(new_counts, key=lambda i: pool_e[i])
        counts, chiral = new_counts, new_chiral
        report.new_per_round.append(n_new)
        log.info("sampling round %d: %d trials, %d new conformers (%.1f s)", rnd + 1,
                 n_trials, n_new, time.perf_counter() - t0)
        if rnd > 0 and n_new == 0:
            report.saturated = True
            break
        if rnd > 0 and target_completeness is not None and counts:
            seen, once = _tally(counts.values())
            if 1.0 - once / seen >= target_completeness:
                report.saturated = True
                break
    if not kept_idx:
        raise InputError("no conformer could be embedded for this molecule "
                         f"({report.embedding_failures} of {report.trials} trials failed); "
                         "check the structure (strained or impossible stereo?)")
    out = Chem.Mol(mol)
    out.RemoveAllConformers()
    for new_id, i in enumerate(kept_idx):
        conf = Chem.Conformer(mol.GetNumAtoms())
        for a, (x, y, z) in enumerate(pool_pos[i]):
            conf.SetAtomPosition(a, (float(x), float(y), float(z)))
        conf.SetId(new_id)
        conf.Set3D(True)
        out.AddConformer(conf, assignId=False)
    times = np.array([counts[i] for i in kept_idx], dtype=int)
    report.unique = len(kept_idx)
    report.in_window, report.found_once = _tally(times)
    report.unseen_share = report.found_once / report.in_window if report.in_window else 1.0
    return (out, np.array([pool_e[i] for i in kept_idx]), times,
            np.array([chiral[i] for i in kept_idx], dtype=bool), report)
