"""How much a conformer search will cost, told before it starts.

:func:`estimate_search` gives an order-of-magnitude estimate of the CPU time of
:func:`confpop.search` from the molecule's size (atoms, hydrogens included), its rotatable
bonds, the trial structures per round and the final method; :func:`check_search_budget`
refuses a search whose estimate is above :data:`MAX_CPU_HOURS` (or whose ``n_trials`` is
above :data:`MAX_TRIALS`) unless the caller insists (``allow_long=True``; on the command line
``--allow-long-run``).

The model (constants measured here with ``benchmarks/bench_cost.py``, one thread each):

- one trial structure (ETKDG embedding + MMFF94s relaxation) costs
  ``0.0045 s * (n_atoms / 24) ** 2.8`` (0.0045 s at 24 atoms, 0.22 s at 96 atoms); one
  relaxation of a moved conformer (:mod:`confpop.moves`) is counted at the same price
  (measured: 0.0044 s per move relaxation on the 27-atom ester below against 0.0063 s for a
  trial, 0.016 s on propranolol against 0.019 s);
- one GFN2-xTB energy + gradient costs ``0.0087 s * (n_atoms / 24) ** 1.85`` (0.0087 s at
  24 atoms, 0.11 s at 96); GFN1 is taken as GFN2, GFN-FF and force fields as free;
- sampling draws ``max_rounds * n_trials`` trial structures (default 20 rounds): the
  search's own bound, reached by 1-decanol with the two streams (they never agreed) and with
  one stream, while the other molecules below stopped after 1 round (two streams) or 2-16
  (one stream); with two streams each round also compares the streams' conformers, priced
  as ``rounds * structures / 2`` trial structures (1-decanol: 434 s wall of sampling, 424
  CPU s with the screen's 3,413 single points, against 113 s for its 10,300 relaxations at
  the trial price: roughly 0.7 of a trial per conformer and round at 33 atoms; scaled with
  size like a trial, not measured at other sizes);
- the move search (on by default) moves at most ``min(max_parents, 2 * S)`` parents (two
  streams; one stream ``S``), each with every move of :func:`confpop.moves.list_moves`, where
  ``S = 3 ** rotatable_bonds * 2 ** saturated_rings`` bounds the molecule's conformers;
- the structures that reach the tight-binding stages (single point, then optimization with
  31 gradient calls each: a median of 29 optimizer calls measured at 31 atoms, plus single
  points) are ``min(S, rounds * n_trials + MOVE_YIELD * max_parents)`` with moves and
  ``min(S, rounds * n_trials)`` without; every one is counted as optimized (the screen
  dropped 0-17 % of them in the measurements below).

Measured (``search(smiles, method="gfn2", seed=0, workers=1)``, MMFF94s sampling and the GFN2
screen; "new" the defaults: move search, two streams, overlap 0.9; "old" ``moves=False,
target_overlap=None``), against what this module assumed before it counted the moves and
the streams (three rounds, ``min(n_trials, 3 ** rotatable_bonds)`` optimizations, no move
relaxations). Structures: force-field conformers single-pointed / optimized at GFN2;
est./act.: structures the estimate assumes over those optimized:

===============================  ====  ==============  ===========  ===========  ===========
molecule (atoms, rot. bonds)     path  relaxations     structures   est./act.    est./act.
                                       ETKDG + moves   sp / opt     before       now
===============================  ====  ==============  ===========  ===========  ===========
1-butanol (15, 3)                old   100             12 / 12      27: 2.3      27: 2.3
                                 new   50 + 180        15 / 15      27: 1.8      27: 1.8
ester CCOC(=O)[C@@H](C)CCOC      old   300             111 / 111    50: 0.45     243: 2.2
(invented; 27, 5)                new   50 + 4,560      161 / 161    50: 0.31     243: 1.5
propranolol (40, 7)              old   800             253 / 233    50: 0.21     1,000: 4.3
                                 new   50 + 6,400      565 / 468    50: 0.11     1,600: 3.4
CC(C)[C@H]1CC[C@H](OCCO)CC1      old   400             71 / 71      50: 0.70     486: 6.8
(invented; 35, 5)                new   50 + 1,972      149 / 149    50: 0.34     486: 3.3
1-decanol (33, 9)                old   3,100           1788 / 1788  155: 0.087   3,100: 1.7
                                 new   3,100 + 7,200   3413 / 3413  155: 0.045   3,700: 1.08
===============================  ====  ==============  ===========  ===========  ===========

Rounds: two streams stopped after 1 round ("streams agree") except 1-decanol (20, the round
budget); one stream after 2, 6, 16, 8 and 20. Whole GFN2 searches (same call, CPU seconds of
one process under load, est./act.): 1-butanol old 1.4 s (before 3.2 s: 2.3; now 4.4 s: 3.1),
new 1.4 s (2.3; now 5.1 s: 3.6); the ester old 45 s (before 18 s: 0.39; now 90 s: 2.0), new
84 s (before 0.21; now 143 s: 1.7). Sampling alone (wall seconds, new): 1-decanol
434 s (estimated 5.1 s before, 519 s now), propranolol 111 s (2.8 / 440), the ester 24 s
(0.9 / 59), the cyclohexane ether 9 s (1.9 / 164), 1-butanol 0.4 s (0.2 / 1.9).

It is meant to tell minutes from days, not to predict a run: a real run may stop sampling
earlier or later (the streams' agreement, the completeness target), and a distributed
executor divides the wall time.
"""

from __future__ import annotations

from dataclasses import dataclass

from .errors import InputError

__all__ = ["SearchEstimate", "estimate_search", "check_search_budget", "MAX_CPU_HOURS",
           "MAX_TRIALS"]

#: estimated CPU hours above which a search is refused unless the caller insists. Propranolol
#: (40 atoms, 7 rotatable bonds, GFN2) is estimated at 0.44 CPU hours with the move search and
#: the two streams (0.01 before they were counted); an invented flexible drug-sized
#: amide-ether (61 atoms, 12 rotatable bonds, tests/test_budget.py) at 3.1 (refused; 0.09
#: before), 1.0 with 5 rounds; the invented 170-heavy-atom peptide of
#: tests/test_cli_safety.py at ~400.
MAX_CPU_HOURS = 2.0
#: most trial structures per sampling round without insisting: the largest default
#: (sampling.default_trials) is 600, for macrocycles
MAX_TRIALS = 10_000
#: sampling rounds assumed when ``max_rounds`` is not given: the search's default bound (20),
#: which 1-decanol reached with the two streams and with one (module notes); 3 before the
#: move search and the two streams were counted
ROUNDS = 20
#: distinct conformers the move search adds per parent allowed (``MoveSettings.max_parents``):
#: propranolol reached 565 force-field conformers with its 400 parents (1.41 per parent;
#: 50 ETKDG trials), the other molecules of the module notes 0.5-1.3 per parent moved
MOVE_YIELD = 1.5
_TRIAL_SECONDS, _TRIAL_POWER = 0.0045, 2.8
_GRADIENT_SECONDS, _GRADIENT_POWER = 0.0087, 1.85
_CALLS_PER_CONFORMER = 31
_CHEAP = ("gfnff", "mmff94", "mmff94s", "uff", "model")


@dataclass(frozen=True)
class SearchEstimate:
    """An order-of-magnitude estimate of a search's CPU time.

    Attributes
    ----------
    atoms, rotatable_bonds, trials : int
    method : str
    sampling_seconds, optimization_seconds : float, CPU seconds
    relaxations : int
        Force-field relaxations assumed in sampling (trial structures and moved conformers).
    structures : int
        Structures assumed to reach the final method (single point and optimization).
    moves : int
        Moves per parent conformer (0: the move search is off).
    """

    atoms: int
    rotatable_bonds: int
    trials: int
    method: str
    sampling_seconds: float
    optimization_seconds: float
    relaxations: int = 0
    structures: int = 0
    moves: int = 0

    @property
    def cpu_hours(self) -> float:
        return (self.sampling_seconds + self.optimization_seconds) / 3600.0

    def describe(self) -> str:
        level = (f"{self.structures} structures to optimize with {self.method}"
                 if self.method not in _CHEAP else f"method {self.method}")
        return (f"{self.atoms} atoms, {self.rotatable_bonds} rotatable bonds, {self.trials} "
                f"trials per round, {self.relaxations} force-field relaxations"
                f"{' (moves included)' if self.moves else ''}, {level}: about "
                f"{self.cpu_hours:.2g} CPU hours")


def estimate_search(mol, *, method: str = "gfn2", n_trials: int | None = None,
                    moves=True, target_overlap: float | None = 0.9,
                    max_rounds: int | None = None) -> SearchEstimate:
    """Estimate the CPU time of searching ``mol`` (an RDKit Mol with explicit hydrogens).

    ``moves``, ``target_overlap`` and ``max_rounds`` are :func:`confpop.search`'s: the move
    search (True, False or a :class:`confpop.moves.MoveSettings`), two streams (a number) or
    one (None), and the most rounds (None: the search's default).

    Examples
    --------
    >>> from rdkit import Chem
    >>> small = estimate_search(Chem.AddHs(Chem.MolFromSmiles("CCCCCCCO")))
    >>> small.atoms, small.rotatable_bonds, small.structures, small.cpu_hours < 0.1
    (24, 6, 729, True)
    """
    from .moves import MoveSettings, list_moves
    from .sampling import default_trials, flexibility
    from .settings import SEARCH_DEFAULTS

    n_atoms = mol.GetNumAtoms()
    n_rot = flexibility(mol)["rotatable_bonds"]
    trials = default_trials(mol) if n_trials is None else int(n_trials)
    if isinstance(max_rounds, bool) or not isinstance(max_rounds, int) or max_rounds < 1:
        max_rounds = SEARCH_DEFAULTS.max_rounds  # None, or a bad value the search reports
    streams = 1 if target_overlap is None else 2
    rounds = max_rounds
    # a value other than a bool or MoveSettings is reported by the search; assume moves on
    settings = moves if isinstance(moves, MoveSettings) else \
        (None if moves is False or moves is None else MoveSettings())
    move_list = list_moves(mol, settings) if settings is not None else []
    rings = sum(1 for m in list_moves(mol, MoveSettings()) if m.kind == "ring flip")
    # conformers the molecule can have, roughly: three per rotor, two shapes per saturated ring
    space = 3 ** min(n_rot, 20) * 2 ** min(rings, 20)
    drawn = rounds * trials
    if move_list:
        parents = min(settings.max_parents, streams * space)
        relaxations = drawn + parents * len(move_list)
        structures = min(space, drawn + int(MOVE_YIELD * settings.max_parents))
    else:
        relaxations = drawn
        structures = min(space, drawn)
    scale = n_atoms / 24.0
    # two streams: every round compares their conformers (about half of them on average)
    compared = rounds * structures // 2 if streams == 2 else 0
    sampling = (relaxations + compared) * _TRIAL_SECONDS * scale ** _TRIAL_POWER
    method = str(method).lower()
    # each structure: a screening single point and an optimization
    optimization = 0.0 if method in _CHEAP else \
        structures * (1 + _CALLS_PER_CONFORMER) * _GRADIENT_SECONDS * scale ** _GRADIENT_POWER
    return SearchEstimate(n_atoms, n_rot, trials, method, sampling, optimization,
                          relaxations=int(relaxations), structures=int(structures),
                          moves=len(move_list))


def check_search_budget(mol, *, method: str = "gfn2", n_trials: int | None = None,
                        allow_long: bool = False, label: str = "the molecule",
                        option: str = "--allow-long-run", moves=True,
                        target_overlap: float | None = 0.9, max_rounds: int | None = None,
                        levers: str = "fewer --rounds or --trials, --no-moves or a cheaper --method"
                        ) -> SearchEstimate:
    """Refuse a search above :data:`MAX_CPU_HOURS` or :data:`MAX_TRIALS` unless ``allow_long``.

    ``moves``, ``target_overlap`` and ``max_rounds`` as in :func:`estimate_search`;
    ``option`` and ``levers`` name, in the caller's terms, how to insist and how to make the
    search cheaper (defaults: the command line's options).

    Raises
    ------
    InputError
        Naming the estimate, the bound and ``option`` (how to insist).
    """
    if n_trials is not None and (isinstance(n_trials, bool) or not isinstance(n_trials, int)
                                 or n_trials < 1):
        raise InputError(f"the number of trials must be an integer >= 1, got {n_trials!r}")
    estimate = estimate_search(mol, method=method, n_trials=n_trials, moves=moves,
                               target_overlap=target_overlap, max_rounds=max_rounds)
    if allow_long:
        return estimate
    if n_trials is not None and n_trials > MAX_TRIALS:
        raise InputError(f"{n_trials} trials per round is above the bound of {MAX_TRIALS} "
                         f"(defaults are at most 600); pass {option} to insist")
    if estimate.cpu_hours > MAX_CPU_HOURS:
        raise InputError(f"searching {label} would take too long: {estimate.describe()}, "
                         f"above the bound of {MAX_CPU_HOURS:g} CPU hours (an "
                         f"order-of-magnitude estimate, see confpop.budget); pass {option} "
                         f"to insist, or choose {levers}")
    return estimate
