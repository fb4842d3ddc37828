"""How much a conformer search will cost, told before it starts.

:func:`estimate_search` gives an order-of-magnitude estimate of the CPU time of
:func:`confpop.search` from the molecule's size (atoms, hydrogens included), its rotatable
bonds, the trial structures per round and the final method; :func:`check_search_budget`
refuses a search whose estimate is above :data:`MAX_CPU_HOURS` (or whose ``n_trials`` is
above :data:`MAX_TRIALS`) unless the caller insists (``allow_long=True``; on the command line
``--allow-long-run``).

The model (constants measured here with ``benchmarks/bench_cost.py``, one thread each):

- one trial structure (ETKDG embedding + MMFF94s relaxation) costs
  ``0.0045 s * (n_atoms / 24) ** 2.8`` (0.0045 s at 24 atoms, 0.22 s at 96 atoms);
- one GFN2-xTB energy + gradient costs ``0.0087 s * (n_atoms / 24) ** 1.85`` (0.0087 s at
  24 atoms, 0.11 s at 96); GFN1 is taken as GFN2, GFN-FF and force fields as free;
- a search draws :data:`ROUNDS` rounds of ``n_trials`` structures and optimizes
  ``min(n_trials, 3 ** rotatable_bonds)`` conformers with 31 gradient calls each (a median
  of 29 optimizer calls measured at 31 atoms, plus single points).

It is meant to tell minutes from days, not to predict a run: on the molecules above it is
within a factor of about 3 of the measured parts. A real run may stop sampling earlier or
later (the completeness target), and a distributed executor divides the wall time.
"""

from __future__ import annotations

from dataclasses import dataclass

from .errors import InputError

__all__ = ["SearchEstimate", "estimate_search", "check_search_budget", "MAX_CPU_HOURS",
           "MAX_TRIALS"]

#: estimated CPU hours above which a search is refused unless the caller insists. A typical
#: flexible drug-sized molecule (60 atoms, 8 rotatable bonds, GFN2) is estimated at ~6 CPU
#: minutes; the bound leaves 20x room and refuses a 150-heavy-atom peptide (~4 CPU hours).
MAX_CPU_HOURS = 2.0
#: most trial structures per sampling round without insisting: the largest default
#: (sampling.default_trials) is 600, for macrocycles
MAX_TRIALS = 10_000
#: sampling rounds assumed by the estimate (runs measured here stopped after 2-5 rounds)
ROUNDS = 3
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
    """

    atoms: int
    rotatable_bonds: int
    trials: int
    method: str
    sampling_seconds: float
    optimization_seconds: float

    @property
    def cpu_hours(self) -> float:
        return (self.sampling_seconds + self.optimization_seconds) / 3600.0

    def describe(self) -> str:
        return (f"{self.atoms} atoms, {self.rotatable_bonds} rotatable bonds, {self.trials} "
                f"trials per round, method {self.method}: about {self.cpu_hours:.2g} CPU hours")


def estimate_search(mol, *, method: str = "gfn2", n_trials: int | None = None) -> SearchEstimate:
    """Estimate the CPU time of searching ``mol`` (an RDKit Mol with explicit hydrogens).

    Examples
    --------
    >>> from rdkit import Chem
    >>> small = estimate_search(Chem.AddHs(Chem.MolFromSmiles("CCCCCCCO")))
    >>> small.atoms, small.rotatable_bonds, small.cpu_hours < 0.05
    (24, 6, True)
    """
    from .sampling import default_trials, flexibility

    n_atoms = mol.GetNumAtoms()
    n_rot = flexibility(mol)["rotatable_bonds"]
    trials = default_trials(mol) if n_trials is None else int(n_trials)
    scale = n_atoms / 24.0
    sampling = ROUNDS * trials * _TRIAL_SECONDS * scale ** _TRIAL_POWER
    optimized = min(trials, 3 ** min(n_rot, 20))
    method = str(method).lower()
    optimization = 0.0 if method in _CHEAP else \
        optimized * _CALLS_PER_CONFORMER * _GRADIENT_SECONDS * scale ** _GRADIENT_POWER
    return SearchEstimate(n_atoms, n_rot, trials, method, sampling, optimization)


def check_search_budget(mol, *, method: str = "gfn2", n_trials: int | None = None,
                        allow_long: bool = False, label: str = "the molecule",
                        option: str = "--allow-long-run") -> SearchEstimate:
    """Refuse a search above :data:`MAX_CPU_HOURS` or :data:`MAX_TRIALS` unless ``allow_long``.

    Raises
    ------
    InputError
        Naming the estimate, the bound and ``option`` (how to insist).
    """
    if n_trials is not None and (isinstance(n_trials, bool) or not isinstance(n_trials, int)
                                 or n_trials < 1):
        raise InputError(f"the number of trials must be an integer >= 1, got {n_trials!r}")
    estimate = estimate_search(mol, method=method, n_trials=n_trials)
    if allow_long:
        return estimate
    if n_trials is not None and n_trials > MAX_TRIALS:
        raise InputError(f"{n_trials} trials per round is above the bound of {MAX_TRIALS} "
                         f"(defaults are at most 600); pass {option} to insist")
    if estimate.cpu_hours > MAX_CPU_HOURS:
        raise InputError(f"searching {label} would take too long: {estimate.describe()}, "
                         f"above the bound of {MAX_CPU_HOURS:g} (an order-of-magnitude "
                         f"estimate, see confpop.budget); pass {option} to insist, or choose "
                         "fewer --trials or a cheaper --method")
    return estimate
