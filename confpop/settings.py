"""Settings as data: the defaults of a search, of sampling, of a batch and of a torsion scan.

Frozen dataclasses, one field per keyword of the function they describe, with the default that
function uses. This module imports nothing but the standard library (no RDKit, no numpy), so
the command line reads its defaults here without loading chemistry. The functions keep their
keywords; ``tests/test_settings.py`` checks that every keyword default of
:func:`confpop.search`, :func:`confpop.sampling.sample_conformers`,
:func:`confpop.search_many`, :func:`confpop.scan_torsion` and of the command line equals the
field here, so there is one set of defaults.

Where each default was measured is written beside it (the measurements themselves are in the
module notes of :mod:`confpop.pipeline` and :class:`confpop.prune.PruneSettings`).

Examples
--------
>>> from confpop.settings import SearchSettings
>>> s = SearchSettings(solvent="water")
>>> s.method, s.min_population, s.solvent
('gfn2', 0.0001, 'water')
>>> SearchSettings().replace(seed=3).seed
3
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

__all__ = ["SearchSettings", "SamplingSettings", "BatchSettings", "ScanSettings",
           "SEARCH_DEFAULTS", "SAMPLING_DEFAULTS", "BATCH_DEFAULTS", "SCAN_DEFAULTS"]


class _Settings:
    """Shared behaviour: ``replace`` and ``keywords``."""

    def replace(self, **changes):
        """A copy with some fields changed (unknown names are an error)."""
        return dataclasses.replace(self, **changes)

    def keywords(self) -> dict:
        """The fields as a dict of keyword arguments, e.g. ``search(mol, **s.keywords())``."""
        return {f.name: getattr(self, f.name) for f in dataclasses.fields(self)}


@dataclass(frozen=True)
class SearchSettings(_Settings):
    """Keywords of :func:`confpop.search` (and of each molecule of :func:`confpop.search_many`).

    Runtime choices (``executor``, ``workers``, ``store``, ``progress``, ``allow_long``) are
    not settings of the result and are left out.

    Attributes
    ----------
    method : str
        Final level. "gfn2": GFN2-xTB, the cheapest level whose conformer energies we trust
        for populations (pipeline notes).
    solvent : str or None
        Implicit solvent; None is the gas phase.
    seed : int
        Sampling seed.
    n_trials : int or None
        Trial structures per round; None: from the molecule's flexibility
        (:func:`confpop.sampling.default_trials`).
    temperatures : tuple of float, K
        298.15 K, the standard temperature.
    min_population : float
        Final population cut at the highest temperature, 1e-4: the dropped conformers held
        <= 0.10 % of the population for five of six test molecules (pipeline notes, stage 6).
    screen_margin : float, kcal/mol
        3: keeps the screen's population loss below 0.1 % on six molecules (stage 2).
    energy_window : float or None, kcal/mol
        Optional hard cap on the final relative energy; None: the population cut alone.
    ff_window : float, kcal/mol
        10: the GFN2 minimum lay up to 4.0 and conformers within 1 kcal/mol at GFN2 up to
        7.8 kcal/mol up at MMFF94s (stage 1).
    screen_window : float or None, kcal/mol
        A fixed screening window instead of the population cut + margin.
    rmsd, energy_tolerance : float, angstrom, kcal/mol
        Duplicate criteria 0.2 A and 0.05 kcal/mol (measured: :class:`confpop.prune.PruneSettings`).
    merge_mirror_images : bool
        One row with degeneracy 2 per mirror-image pair.
    max_rounds : int
        20 sampling rounds at most (stage 1).
    target_completeness : float or None
        0.85: seeds agreed on 76 % of the 298 K population at completeness 0.87 versus 43 %
        at 0.6 (stage 1).
    sampling_method : str
        Force field of the sampling stage, MMFF94s.
    convergence : str
        Optimizer preset "tight": final energies within 0.05 kcal/mol of "verytight" (stage 3);
        without its displacement criteria 14-10 instead of 20-30 gradient calls, but final
        structures up to 0.27 angstrom apart in flat basins (measured in :mod:`confpop.optimize`).
    preoptimize : bool
        Off: measured to remove none of 52 conformers of an invented hydroxy-ester.
    preopt_margin : float, kcal/mol
        2: loose energies lie 0.3-1 kcal/mol above the tight ones.
    charge, multiplicity : int or None
        From the input.
    stereo : str
        "refuse" open stereo elements (see :func:`confpop.load_molecule`).
    keep_largest_fragment : bool
        Refuse several fragments unless asked.
    force_trans_amides : bool
        Secondary amides embedded trans (ETKDG's own option).
    method_options : dict or None
        Extra keywords for the engine.
    check_minima : bool
        Re-optimize symmetric conformers off their symmetry (:mod:`confpop.minimum`).
    moves : bool
        The move search from low-energy conformers (:mod:`confpop.moves`): on, because it
        lifted the population overlap with a brute-force ensemble from 0.30-0.75 to 0.93-1.00
        on three benchmark molecules (benchmarks/bench_sampling.py).
    target_overlap : float or None
        0.9: two independent sampling streams stop when their force-field populations overlap
        by this much (sum of min(p, q)); the benchmark's seeds then agreed to 0.999-1.000.
    """

    method: str = "gfn2"
    solvent: str | None = None
    seed: int = 0
    n_trials: int | None = None
    temperatures: tuple = (298.15,)
    min_population: float = 1e-4
    screen_margin: float = 3.0
    energy_window: float | None = None
    ff_window: float = 10.0
    screen_window: float | None = None
    rmsd: float = 0.2
    energy_tolerance: float = 0.05
    merge_mirror_images: bool = True
    max_rounds: int = 20
    target_completeness: float | None = 0.85
    sampling_method: str = "mmff94s"
    convergence: str = "tight"
    preoptimize: bool = False
    preopt_margin: float = 2.0
    charge: int | None = None
    multiplicity: int | None = None
    stereo: str = "refuse"
    keep_largest_fragment: bool = False
    force_trans_amides: bool = True
    method_options: dict | None = None
    check_minima: bool = True
    moves: bool = True
    target_overlap: float | None = 0.9


@dataclass(frozen=True)
class SamplingSettings(_Settings):
    """Keywords of :func:`confpop.sampling.sample_conformers` when called on its own.

    The search passes its own values (``ff_window`` as ``energy_window``, ``max_rounds``,
    ``target_completeness``); these are the lower-level function's defaults, kept as they
    were so that a direct call gives the same result.

    Attributes
    ----------
    n_trials : int or None
        Trial structures per round (None: from the flexibility).
    seed : int
    method : str
        Force field of the relaxation, MMFF94s.
    energy_window : float, kcal/mol
        15: a wide window for a sampling-only call (the search narrows it to ``ff_window``).
    max_rounds : int
        5 rounds at most.
    threads : int
        0: all threads RDKit's embedding may use.
    force_trans_amides : bool
    max_iterations : int
        Force-field iterations per structure, 2000.
    target_completeness : float or None
        None: only the two other stopping rules.
    """

    n_trials: int | None = None
    seed: int = 0
    method: str = "mmff94s"
    energy_window: float = 15.0
    max_rounds: int = 5
    threads: int = 0
    force_trans_amides: bool = True
    max_iterations: int = 2000
    target_completeness: float | None = None


@dataclass(frozen=True)
class BatchSettings(_Settings):
    """Keywords of :func:`confpop.search_many` beyond those of the search itself.

    Attributes
    ----------
    parallel : str
        "auto": molecules in parallel when there are at least as many as workers.
    into_nonempty_folder : bool
        Refuse to write into a folder that holds other files.
    """

    parallel: str = "auto"
    into_nonempty_folder: bool = False


@dataclass(frozen=True)
class ScanSettings(_Settings):
    """Keywords of :func:`confpop.scan_torsion`.

    Attributes
    ----------
    method : str
        "gfn2".
    solvent : str or None
    start, stop, step : float, degrees
        A full turn in 15 degree steps, 24 points. Measured (benchmarks/bench_scan_step.py,
        relaxed GFN2 scans against a 5-degree scan of the same torsion, fitted extrema
        added; n-butane, biphenyl, methyl acetate, N-methylacetamide, an invented
        hydroxy-ester): the worst barrier error was 0.000-0.030 kcal/mol at 10 degrees,
        0.000-0.067 at 15, 0.000-0.118 at 20 and 0.000-1.44 at 30 (the hydroxy-ester, a
        minimum 24 degrees off), at 0.55-0.61 / 0.39-0.43 / 0.30-0.40 / 0.23-0.36 of the
        5-degree scan's CPU; 15 keeps the grid's error far below the method's (about
        1 kcal/mol) at 0.7x the CPU of 10.
    relaxed : bool
        Relaxed scan (every other coordinate optimized at each point).
    conf_id : int
        -1: the first conformer.
    convergence : str
        Optimizer preset, "tight" as in the search.
    unit : str
        kcal/mol.
    hysteresis_threshold : float or None, ``unit``
        None: 0.5 kcal/mol (:data:`confpop.torsion_profile.HYSTERESIS_KCAL`).
    refine : bool
        Compute fitted extrema that fall between grid points.
    """

    method: str = "gfn2"
    solvent: str | None = None
    start: float = -180.0
    stop: float = 180.0
    step: float = 15.0
    relaxed: bool = True
    conf_id: int = -1
    convergence: str = "tight"
    unit: str = "kcal/mol"
    hysteresis_threshold: float | None = None
    refine: bool = True


SEARCH_DEFAULTS = SearchSettings()
SAMPLING_DEFAULTS = SamplingSettings()
BATCH_DEFAULTS = BatchSettings()
SCAN_DEFAULTS = ScanSettings()
