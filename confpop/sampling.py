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
from .moves import apply_move
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
        The last round found no new conformer. (It used to be set also when the completeness
        target or the streams' agreement stopped the rounds, even after a round that found
        16 new conformers; why the rounds stopped is ``stop_reason``, and ``converged``
        says whether the streams agreed.)
    streams : int
        Independent sampling streams (1, or 2 for the two-stream convergence check).
    stream_overlap : float or None
        Population overlap sum_i min(p_i, q_i) of the two streams' ensembles at the
        sampling force field and ``overlap_temperature`` after the last round (1: the same
        populations, 0: nothing shared); None with one stream.
    overlap_per_round : list of float
    target_overlap : float or None
    overlap_temperature : float, K
    converged : bool
        The two streams reached ``target_overlap`` (False: the round budget ended first, or
        one stream only).
    stop_reason : str
        "streams agree", "round budget", "no new conformer", "completeness target".
    move_parents, move_relaxations, move_iterations : int
        Conformers moved, moved structures relaxed, move iterations (all streams).
    move_rejected : int
        Moved structures whose bonds or stereo changed on relaxation (dropped).
    found_by_moves : int
        Distinct conformers in the result that no ETKDG trial structure gave (times_found 0).
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
    streams: int = 1
    stream_overlap: float | None = None
    overlap_per_round: list = field(default_factory=list)
    target_overlap: float | None = None
    overlap_temperature: float = 298.15
    converged: bool = False
    stop_reason: str = ""
    move_parents: int = 0
    move_relaxations: int = 0
    move_iterations: int = 0
    move_rejected: int = 0
    found_by_moves: int = 0

    @property
    def completeness(self) -> float:
        return 1.0 - self.unseen_share

    def as_dict(self) -> dict:
        d = {k: getattr(self, k) for k in self.__dataclass_fields__}
        d["completeness"] = self.completeness
        return d


class _Stream:
    """One sampling stream: its own ETKDG seeds, optional moves, a pool of distinct conformers.

    ``counts`` holds, per kept conformer, how many ETKDG trial structures fell into it
    (conformers only the moves gave have 0: the Good–Turing tally counts draws, and a
    deterministic move is no draw).
    """

    def __init__(self, mol, *, index, n_streams, seed, method, window_h, prune, achiral,
                 threads, force_trans_amides, max_iterations, report):
        self.mol, self.index, self.n_streams, self.seed = mol, index, n_streams, seed
        self.method, self.window_h, self.prune, self.achiral = method, window_h, prune, achiral
        self.threads, self.force_trans_amides = threads, force_trans_amides
        self.max_iterations, self.report = max_iterations, report
        self.pool_pos: list[np.ndarray] = []
        self.pool_e: list[float] = []
        self.pool_w: list[int] = []      # 1 for an ETKDG structure, 0 for a moved one
        self.kept_idx: list[int] = []
        self.counts: dict[int, int] = {}
        self.chiral: dict[int, bool] = {}
        self.moved: set[int] = set()

    def add(self, positions, energies, counted: bool) -> int:
        """Add relaxed structures; returns the conformers new inside the window."""
        start = len(self.pool_pos)
        for p, e in zip(positions, energies):
            self.pool_pos.append(np.asarray(p, dtype=float))
            self.pool_e.append(float(e))
            self.pool_w.append(1 if counted else 0)
        local = self.kept_idx + list(range(start, len(self.pool_pos)))
        if not local:
            return 0
        rep = find_duplicates(self.mol, [self.pool_pos[i] for i in local],
                              [self.pool_e[i] for i in local], self.prune, achiral=self.achiral)
        absorbed: dict[int, list] = {}
        for dup, ref in rep.duplicate_of.items():
            absorbed.setdefault(ref, []).append(local[dup])
        e_min = min(self.pool_e[local[u]] for u in rep.unique)
        new_counts, new_chiral, moved = {}, {}, set()
        n_new = 0
        for u in rep.unique:
            pool_i = local[u]
            if self.pool_e[pool_i] - e_min > self.window_h:
                continue
            members = [pool_i] + absorbed.get(u, [])
            new_counts[pool_i] = sum(self.counts.get(m, self.pool_w[m]) if m in self.counts
                                     else self.pool_w[m] for m in members)
            new_chiral[pool_i] = rep.chiral_conformer[u]
            if any(m in self.moved for m in members):
                moved.add(pool_i)
            if not any(m in self.counts for m in members):
                n_new += 1
        self.kept_idx = sorted(new_counts, key=lambda i: self.pool_e[i])
        self.counts, self.chiral, self.moved = new_counts, new_chiral, moved
        return n_new

    def etkdg_round(self, rnd: int, n_trials: int) -> int | None:
        """One ETKDG round; None when nothing embedded and nothing ever did."""
        report = self.report
        trial, failed = embed(self.mol, n_trials, seed=self.seed,
                              round_index=rnd * self.n_streams + self.index, threads=self.threads,
                              force_trans_amides=self.force_trans_amides)
        report.trials += n_trials
        report.embedding_failures += failed
        if trial.GetNumConformers() == 0:
            return None if not self.kept_idx else 0
        distinct = distinct_structures(trial)
        report.repeated_embeddings += trial.GetNumConformers() - len(distinct)
        if len(distinct) < trial.GetNumConformers():
            kept = Chem.Mol(trial)
            kept.RemoveAllConformers()
            for cid in distinct:
                kept.AddConformer(Chem.Conformer(trial.GetConformer(cid)), assignId=True)
            trial = kept
        relaxed, results = minimize_conformers(trial, method=self.method, threads=self.threads,
                                               max_iterations=self.max_iterations)
        report.minimization_unconverged += sum(1 for ok, _ in results if not ok)
        pos, ens = [], []
        for conf, (_, energy) in zip(relaxed.GetConformers(), results):
            if not np.isfinite(energy):  # the relaxation failed (GFN-FF only)
                report.relaxation_failures += 1
                continue
            # RDKit's force fields keep the bonds they are given; GFN-FF relaxes from the
            # geometry and can break an ETKDG structure of a hypervalent or metal centre
            # (SF6 from ETKDG: S-F 1.0 and 3.1 A, the lowest GFN-FF energy of 40 trials)
            if self.method == "gfnff" and integrity_problems(relaxed, conf.GetId()):
                report.relaxation_failures += 1
                continue
            pos.append(np.array(conf.GetPositions()))
            ens.append(energy)
        return self.add(pos, ens, counted=True)

    def explore(self, moves, settings) -> int:
        """Move search from the unmoved low-energy conformers until nothing new turns up."""
        from .molecule import stereo_signature

        report = self.report
        if not moves or not self.kept_idx:
            return 0
        parent_h = convert(settings.parent_window, "kcal/mol", "hartree")
        ref = Chem.Mol(self.mol)
        ref.RemoveAllConformers()
        ref_stereo = None
        total_new = 0
        for _ in range(settings.max_iterations):
            budget = settings.max_parents - report.move_parents
            e_min = self.pool_e[self.kept_idx[0]]
            parents = [i for i in self.kept_idx if i not in self.moved
                       and self.pool_e[i] - e_min <= parent_h][:max(budget, 0)]
            if not parents:
                break
            if ref_stereo is None:
                ref.AddConformer(_conformer(self.mol, self.pool_pos[self.kept_idx[0]]), assignId=True)
                ref_stereo = stereo_signature(ref, 0)
            children = Chem.Mol(self.mol)
            children.RemoveAllConformers()
            for i in parents:
                for move in moves:
                    children.AddConformer(_conformer(self.mol, apply_move(self.mol, self.pool_pos[i], move)),
                                          assignId=True)
            self.moved.update(parents)
            report.move_parents += len(parents)
            report.move_iterations += 1
            relaxed, results = minimize_conformers(children, method=self.method,
                                                   threads=self.threads,
                                                   max_iterations=self.max_iterations)
            report.move_relaxations += len(results)
            pos, ens = [], []
            for conf, (_, energy) in zip(relaxed.GetConformers(), results):
                if not np.isfinite(energy) or energy - e_min > self.window_h:
                    continue
                if integrity_problems(relaxed, conf.GetId(), ref_stereo):
                    report.move_rejected += 1
                    continue
                pos.append(np.array(conf.GetPositions()))
                ens.append(energy)
            n_new = self.add(pos, ens, counted=False)
            total_new += n_new
            if n_new == 0:
                break
        return total_new

    def ensemble(self):
        """(positions, energies, counts, chiral) of the kept conformers, lowest first."""
        return ([self.pool_pos[i] for i in self.kept_idx], [self.pool_e[i] for i in self.kept_idx],
                [self.counts[i] for i in self.kept_idx], [self.chiral[i] for i in self.kept_idx])


def _conformer(mol, positions):
    conf = Chem.Conformer(mol.GetNumAtoms())
    for a, (x, y, z) in enumerate(np.asarray(positions, dtype=float)):
        conf.SetAtomPosition(a, (float(x), float(y), float(z)))
    conf.Set3D(True)
    return conf


def stream_overlap(mol, streams, temperature, prune, achiral) -> float:
    """Population overlap sum_i min(p_i, q_i) of two streams at the force-field level."""
    from .moves import match_conformers, population_overlap
    from .thermo import boltzmann_weights

    (pa, ea, _, ca), (pb, eb, _, cb) = streams[0].ensemble(), streams[1].ensemble()
    if not ea or not eb:
        return 0.0
    la, lb = match_conformers(mol, pa, ea, pb, eb, prune, achiral=achiral)
    wa = boltzmann_weights(np.array(ea), temperature, unit="hartree",
                           degeneracy=[2 if achiral and c else 1 for c in ca])
    wb = boltzmann_weights(np.array(eb), temperature, unit="hartree",
                           degeneracy=[2 if achiral and c else 1 for c in cb])
    return population_overlap(la, wa, lb, wb)


def sample_conformers(mol: Chem.Mol, *, n_trials: int | None = None, seed: int = 0,
                      method: str = "mmff94s", energy_window: float = 15.0,
                      prune: PruneSettings | None = None, max_rounds: int = 5,
                      threads: int = 0, force_trans_amides: bool = True,
                      max_iterations: int = 2000, target_completeness: float | None = None,
                      moves=None, streams: int = 1, target_overlap: float | None = None,
                      overlap_temperature: float = 298.15):
    """Sample and force-field relax conformers until sampling saturates or streams agree.

    With one stream (the default) rounds stop when a round adds no new conformer, when the
    Good–Turing completeness estimate reaches ``target_completeness``, or after
    ``max_rounds``. With ``streams=2`` and ``target_overlap`` the trial structures of a
    round are split between two independent streams (seeds of their own), each stream
    runs its own move search, and rounds go on until the force-field populations of the two
    streams overlap by ``target_overlap`` (sum_i min(p_i, q_i) at ``overlap_temperature``)
    or ``max_rounds`` rounds were drawn; the result is the union of both streams.

    Parameters
    ----------
    mol : Chem.Mol
        Checked molecule with explicit hydrogens (see :func:`confpop.load_molecule`).
    n_trials : int, optional
        Trial structures per round, all streams together (default :func:`default_trials`).
    seed : int
        Any integer; round r of stream s uses the RDKit seed :func:`round_seed`
        (seed, r * streams + s), so the same seed gives the same ensemble and no round
        repeats another.
    method : {"mmff94s", "mmff94", "uff", "gfnff"}
        Force field for the relaxation.
    energy_window : float, kcal/mol
        Conformers more than this above the lowest are not kept.
    prune : PruneSettings
        Duplicate criteria (defaults: :class:`confpop.prune.PruneSettings`).
    max_rounds : int
        Upper bound on rounds (the budget).
    target_completeness : float, optional
        One stream: stop once 1 - n₁/N reaches this value (e.g. 0.9: a further trial finds a
        new conformer with probability <= 10 %). None: only the two other rules. Not a stop
        rule with two streams (the estimate is still reported).
    moves : MoveSettings, bool or None
        Move search (:mod:`confpop.moves`) after every ETKDG round: True for the default
        settings, None/False for none.
    streams : {1, 2}
    target_overlap : float, optional
        Two streams: stop once their population overlap reaches this value.
    overlap_temperature : float, K

    Returns
    -------
    mol : Chem.Mol
        The distinct conformers (ids 0..k-1, lowest energy first).
    energies : (k,) array, hartree
        Force-field energies.
    times_found : (k,) int array
        ETKDG trial structures that fell into each conformer (0: found by a move only).
    chiral_conformer : (k,) bool array
        Whether each conformer differs from its mirror image (achiral molecules only).
    report : SamplingReport
    """
    from .moves import MoveSettings, list_moves

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
    if streams not in (1, 2) or isinstance(streams, bool):
        raise InputError(f"streams must be 1 or 2, got {streams!r}")
    if target_overlap is not None and not 0.0 < target_overlap <= 1.0:
        raise InputError(f"target_overlap must lie in (0, 1], got {target_overlap}")
    if moves is True:
        moves = MoveSettings()
    elif moves is False:
        moves = None
    move_list = list_moves(mol, moves) if moves is not None else []
    report = SamplingReport(streams=streams, target_overlap=target_overlap if streams == 2 else None,
                            overlap_temperature=float(overlap_temperature))
    window_h = convert(energy_window, "kcal/mol", "hartree")
    from .prune import is_achiral
    achiral = is_achiral(mol)
    # A probe of a few trial structures first: a molecule that distance geometry cannot embed
    # at all (C60: ~25 s per failed trial here) is refused in about a minute, not after a
    # round of n_trials failures.
    t0 = time.perf_counter()
    probe, _ = embed(mol, min(PROBE_TRIALS, n_trials), seed=seed, round_index=max_rounds * streams,
                     threads=threads, force_trans_amides=force_trans_amides)
    if probe.GetNumConformers() == 0:
        raise InputError(
            f"no conformer could be embedded: ETKDG failed on all {min(PROBE_TRIALS, n_trials)} "
            f"probe trial structures, also from random coordinates "
            f"({time.perf_counter() - t0:.0f} s); the molecule is likely too strained or caged "
            "for distance geometry, on which this sampling rests")
    pool = [_Stream(mol, index=k, n_streams=streams, seed=seed, method=method, window_h=window_h,
                    prune=prune, achiral=achiral, threads=threads,
                    force_trans_amides=force_trans_amides, max_iterations=max_iterations,
                    report=report) for k in range(streams)]
    per_stream = [n_trials // streams + (1 if k < n_trials % streams else 0) for k in range(streams)]
    dead = False
    for rnd in range(max_rounds):
        t0 = time.perf_counter()
        report.rounds += 1
        n_new = 0
        for stream, n in zip(pool, per_stream):
            got = stream.etkdg_round(rnd, max(n, 1))
            if got is None:  # every trial failed and nothing was ever embedded: more rounds
                dead = True  # of the same would only repeat that (C60 took 30 s a round)
                break
            n_new += got
            if move_list:
                n_new += stream.explore(move_list, moves)
        if dead:
            break
        report.new_per_round.append(n_new)
        if streams == 2:
            report.stream_overlap = stream_overlap(mol, pool, overlap_temperature, prune, achiral)
            report.overlap_per_round.append(round(report.stream_overlap, 4))
        log.info("sampling round %d: %d trials, %d new conformers%s (%.1f s)", rnd + 1,
                 n_trials, n_new, "" if streams == 1 else f", stream overlap {report.stream_overlap:.3f}",
                 time.perf_counter() - t0)
        if streams == 2 and target_overlap is not None:
            if report.stream_overlap >= target_overlap:
                report.converged = True
                report.saturated = n_new == 0
                report.stop_reason = "streams agree"
                break
            continue
        if rnd > 0 and n_new == 0:
            report.saturated = True
            report.stop_reason = "no new conformer"
            break
        counts = pool[0].counts
        if rnd > 0 and target_completeness is not None and counts:
            seen, once = _tally(counts.values())
            if seen and 1.0 - once / seen >= target_completeness:
                report.saturated = n_new == 0
                report.stop_reason = "completeness target"
                break
    if not report.stop_reason:
        report.stop_reason = "round budget"
    if streams == 1:
        pos, energies, times, chiral = pool[0].ensemble()
    else:
        pos, energies, times, chiral = _union(mol, pool, prune, achiral)
    if not pos:
        raise InputError("no conformer could be embedded for this molecule "
                         f"({report.embedding_failures} of {report.trials} trials failed); "
                         "check the structure (strained or impossible stereo?)")
    e_min = min(energies)
    keep = [i for i in range(len(pos)) if energies[i] - e_min <= window_h]
    out = Chem.Mol(mol)
    out.RemoveAllConformers()
    for new_id, i in enumerate(keep):
        conf = _conformer(mol, pos[i])
        conf.SetId(new_id)
        out.AddConformer(conf, assignId=False)
    times = np.array([times[i] for i in keep], dtype=int)
    report.unique = len(keep)
    report.found_by_moves = int((times == 0).sum())
    report.in_window, report.found_once = _tally(times)
    report.unseen_share = report.found_once / report.in_window if report.in_window else 1.0
    return (out, np.array([energies[i] for i in keep]), times,
            np.array([chiral[i] for i in keep], dtype=bool), report)


def _union(mol, pool, prune, achiral):
    """The conformers of all streams, duplicates merged (counts added), lowest first."""
    pos, e, counts = [], [], []
    for stream in pool:
        p, en, c, _ = stream.ensemble()
        pos += p
        e += en
        counts += c
    rep = find_duplicates(mol, pos, e, prune, achiral=achiral)
    total = {u: counts[u] for u in rep.unique}
    for dup, ref in rep.duplicate_of.items():
        total[ref] += counts[dup]
    order = rep.unique  # lowest energy first
    return ([pos[u] for u in order], [e[u] for u in order], [total[u] for u in order],
            [rep.chiral_conformer[u] for u in order])
