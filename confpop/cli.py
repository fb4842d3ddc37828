"""The ``confpop`` command.

Each subcommand is one entry of ``_COMMANDS``: ``(name, add_arguments_fn, run_fn, help)``,
with its two functions ``_add_<name>(parser)`` and ``_run_<name>(args) -> int`` kept together
below. ``main`` turns every expected error (ConfpopError, ValueError, OSError) into one line
``confpop: error: <message>`` on stderr and exit status 2, without a traceback.

Examples
--------
>>> main(["rates", "20", "--temperature", "298.15", "--json"])  # doctest: +ELLIPSIS
{...}
0
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import warnings as _warnings

from . import __version__
from .errors import CalculationFailed, ConfpopError, InputError

__all__ = ["main"]

_PROG = "confpop"
_default_show_warning = _warnings.showwarning


class _Parser(argparse.ArgumentParser):
    """An argument parser whose usage errors become one-line InputErrors (handled in main)."""

    def error(self, message):  # noqa: D401 - argparse hook
        raise InputError(message)


# the search's sampling defaults (kept equal to confpop.pipeline's by a test; not imported
# here so that parsing the command line does not load RDKit)
_MAX_ROUNDS = 20
_TARGET_COMPLETENESS = 0.85
_TARGET_OVERLAP = 0.9  # pipeline.TARGET_OVERLAP (checked equal in the tests)
_MIN_POPULATION = 1e-4
_SCREEN_MARGIN = 3.0


class _Once(argparse.Action):
    """Store a list option, refusing it a second time (``-T 298 --temperature 310`` kept only
    310 before, silently)."""

    def __call__(self, parser, namespace, values, option_string=None):
        seen = getattr(namespace, "_given_once", set())
        if self.dest in seen:
            raise InputError(f"{option_string} given twice; give every value after one "
                             f"{'/'.join(self.option_strings)}, e.g. -T 273.15 298.15")
        seen.add(self.dest)
        namespace._given_once = seen
        setattr(namespace, self.dest, values)


def _finite_float(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not math.isfinite(value):
        raise argparse.ArgumentTypeError(f"expected a finite number, got {text!r}")
    return value


def _json_number(x: float):
    """JSON has no inf/NaN: write them as null."""
    x = float(x)
    return x if math.isfinite(x) else None


# --------------------------------------------------------------------------- rates

_RATES_CAUTION = (
    "Caution: computed barriers carry errors of about 1-2 kcal/mol, so these rates are "
    "uncertain by a factor of 5-30 at room temperature; confirm with experiment."
)


def _add_rates(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "barriers", metavar="BARRIER", nargs="+", type=_finite_float,
        help="free energy of activation ΔG‡ of one direction (A -> B), in --unit",
    )
    parser.add_argument(
        "--temperature", "-T", metavar="T", nargs="+", type=_finite_float, default=[298.15], action=_Once,
        help="temperature(s) in K (default 298.15)",
    )
    parser.add_argument(
        "--unit", default="kcal/mol",
        help='energy unit of the barriers: "kcal/mol" (default), "kJ/mol", "hartree", "eV", "cm-1"',
    )
    parser.add_argument(
        "--delta-nu", metavar="HZ", type=_finite_float, default=100.0,
        help="NMR signal separation in Hz used for the exchange regime (default 100 Hz)",
    )
    parser.add_argument(
        "--transmission", metavar="KAPPA", type=_finite_float, default=1.0,
        help="transmission coefficient κ of the Eyring equation, 0 < κ <= 1 (default 1)",
    )
    parser.add_argument("--json", action="store_true", help="print JSON to stdout instead of a table")


def _run_rates(args: argparse.Namespace) -> int:
    import numpy as np

    from . import kinetics
    from .units import normalize_unit

    unit = normalize_unit(args.unit)
    barriers = np.asarray(args.barriers, dtype=float)
    temps = np.asarray(args.temperature, dtype=float)
    for option, values, rule in (("BARRIER", barriers, "must be >= 0"),
                                 ("--temperature", temps, "must be > 0 K"),
                                 ("--delta-nu", [args.delta_nu], "must be > 0 Hz"),
                                 ("--transmission", [args.transmission], "must be > 0")):
        bad = [v for v in values if (v < 0.0 if option == "BARRIER" else v <= 0.0)]
        if bad:
            raise InputError(f"{option} {rule}, got {bad[0]:g}")
    if args.transmission > 1.0:
        raise InputError(f"--transmission must be > 0 and <= 1 (the fraction of crossings that "
                         f"do not recross), got {args.transmission:g}")
    b, t = np.meshgrid(barriers, temps, indexing="ij")  # rows: barriers, columns: temperatures
    k = np.atleast_1d(kinetics.eyring_rate(b, t, unit, args.transmission))
    t_half = np.atleast_1d(kinetics.half_life(b, t, unit, args.transmission))
    tau = np.atleast_1d(kinetics.mean_residence_time(b, t, unit, args.transmission))
    regime = np.atleast_1d(kinetics.exchange_regime(k, args.delta_nu))
    # the classes are defined by the half-life at 37 °C, whatever temperatures are asked for
    classes = np.atleast_1d(kinetics.atropisomer_class(barriers, 310.15, unit,
                                                       transmission=args.transmission))

    rows = []
    for i, barrier in enumerate(barriers):
        for j, temp in enumerate(temps):
            rows.append({
                "barrier": float(barrier),
                "temperature_K": float(temp),
                "rate_per_s": _json_number(k[i, j]),
                "half_life_s": _json_number(t_half[i, j]),
                "half_life": kinetics.format_duration(t_half[i, j]),
                "mean_residence_time_s": _json_number(tau[i, j]),
                "mean_residence_time": kinetics.format_duration(tau[i, j]),
                "atropisomer_class_37C": int(classes[i]),
                "nmr_exchange": str(regime[i, j]),
            })

    if args.json:
        payload = {
            "unit": unit,
            "transmission": args.transmission,
            "delta_nu_hz": args.delta_nu,
            "process": "first order, one direction (A -> B); t1/2 = ln2/k, residence time = 1/k",
            "atropisomer_class": "LaPlante class from the enantiomerization half-life at 310.15 K",
            "caution": _RATES_CAUTION,
            "results": rows,
        }
        print(json.dumps(payload, indent=2, ensure_ascii=False))
        return 0

    header = (f"{'ΔG‡ (' + unit + ')':>16}  {'T/K':>7}  {'k/s^-1':>10}  {'t1/2':>10}  "
              f"{'residence':>10}  {'class(37 °C)':>12}  NMR exchange")
    lines = [
        "Eyring rates, first order, one direction (A -> B); "
        f"κ = {args.transmission:g}; NMR regime for Δν = {args.delta_nu:g} Hz",
        header,
    ]
    for row in rows:
        k_text = "0" if row["rate_per_s"] in (None, 0.0) else f"{row['rate_per_s']:.3e}"
        lines.append(
            f"{row['barrier']:>16.2f}  {row['temperature_K']:>7.2f}  {k_text:>10}  "
            f"{row['half_life']:>10}  {row['mean_residence_time']:>10}  "
            f"{row['atropisomer_class_37C']:>12d}  {row['nmr_exchange']}"
        )
    lines.append(_RATES_CAUTION)
    print("\n".join(lines))
    return 0


# --------------------------------------------------------------------------- ensemble

_ENSEMBLE_CAUTION = (
    "Caution: GFN2-xTB conformer energies typically err by 0.5-1.5 kcal/mol against high-level "
    "references (force fields by 1-2 kcal/mol or more), so a population below ~10 % can be off "
    "by a factor of several and close-lying conformers can swap order. Use these numbers to "
    "guide, not replace, experiment (NMR, crystallography) and expert judgement."
)


def _add_ensemble(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("input", metavar="INPUT",
                        help="a SMILES, or a MOL/SDF/XYZ file (or an ensemble SDF written by confpop)")
    parser.add_argument("--method", default="gfn2",
                        help="final level: gfn2 (default), gfn1, gfnff, tblite-gfn2, mmff94s, mmff94, uff")
    parser.add_argument("--solvent", default=None,
                        help="implicit solvent (ALPB) for tight-binding methods, e.g. water, chloroform")
    parser.add_argument("--temperature", "-T", nargs="+", type=_finite_float, default=[298.15], action=_Once,
                        metavar="K", help="temperatures in kelvin (default 298.15)")
    parser.add_argument("--seed", type=int, default=0, help="sampling seed (default 0)")
    parser.add_argument("--trials", type=int, default=None,
                        help="trial structures per sampling round (default: from flexibility; "
                             "more than 10000 needs --allow-long-run)")
    parser.add_argument("--allow-long-run", action="store_true",
                        help="run a search whose estimated cost is above 2 CPU hours (the "
                             "estimate, from atoms, rotatable bonds, trials and method, is "
                             "printed in the refusal)")
    parser.add_argument("--rounds", type=int, default=_MAX_ROUNDS,
                        help=f"most sampling rounds (default {_MAX_ROUNDS})")
    parser.add_argument("--completeness", type=_finite_float, default=_TARGET_COMPLETENESS,
                        metavar="FRACTION",
                        help="stop sampling once the estimated completeness reaches this "
                             f"(default {_TARGET_COMPLETENESS}; 0 = only when a round finds nothing new)")
    parser.add_argument("--agreement", type=_finite_float, default=_TARGET_OVERLAP,
                        metavar="OVERLAP",
                        help="sample in two independent streams until their populations "
                             f"overlap this much (default {_TARGET_OVERLAP}) or --rounds ends; "
                             "0 = one stream, stopped by --completeness")
    parser.add_argument("--no-moves", action="store_true",
                        help="ETKDG trial structures only: no torsion, cis/trans and ring moves "
                             "from the low-energy conformers")
    parser.add_argument("--min-population", type=_finite_float, default=_MIN_POPULATION,
                        metavar="SHARE",
                        help="drop a conformer only when its population at the highest "
                             f"--temperature is below this share (default {_MIN_POPULATION:g})")
    parser.add_argument("--energy-window", type=_finite_float, default=None, metavar="KCAL",
                        help="also drop conformers more than this above the lowest, kcal/mol "
                             "(default: none, the population cut alone)")
    parser.add_argument("--screen-margin", type=_finite_float, default=_SCREEN_MARGIN, metavar="KCAL",
                        help="single points kept within the population cut's energy plus this "
                             f"margin, kcal/mol (default {_SCREEN_MARGIN:g}, measured)")
    parser.add_argument("--screen-window", type=_finite_float, default=None, metavar="KCAL",
                        help="a fixed single-point screening window in kcal/mol instead")
    parser.add_argument("--no-minimum-check", action="store_true",
                        help="do not re-optimize symmetric conformers off their symmetry (the "
                             "check that replaces saddle points; it costs 27-160 %% more on small "
                             "all-symmetric molecules, 0-6 %% on flexible ones)")
    parser.add_argument("--keep-mirror-images", action="store_true",
                        help="keep mirror-image conformers as two rows instead of one row with degeneracy 2")
    parser.add_argument("--charge", type=int, default=None, help="total charge (default: from the input)")
    parser.add_argument("--multiplicity", type=int, default=None,
                        help="spin multiplicity 2S+1 (default: from the input's radicals)")
    parser.add_argument("--enumerate-stereo", action="store_true",
                        help="run every stereoisomer of unassigned centres instead of refusing")
    parser.add_argument("--keep-largest-fragment", action="store_true",
                        help="keep only the largest fragment of a salt or mixture (default: refuse)")
    parser.add_argument("--workers", type=int, default=None,
                        help="worker processes (default: all cores; 1 = serial)")
    parser.add_argument("--store", default=None, metavar="FILE",
                        help="SQLite result store: reuse finished calculations, resume interrupted runs")
    parser.add_argument("--free-energy", action="store_true",
                        help="add harmonic free energies (numerical Hessians at the final level) and "
                             "print populations from E and from G(T) side by side")
    parser.add_argument("--low-mode", default="qrrho", choices=["qrrho", "rrho", "quasi-harmonic"],
                        help="treatment of low-frequency modes with --free-energy (default qrrho)")
    parser.add_argument("--rescore", default=None, choices=["dft"],
                        help="single points at a higher level (dft: B3LYP-D3(BJ)/def2-SVPD through "
                             "PySCF) and populations from them")
    parser.add_argument("--out", default=None, metavar="DIR",
                        help="write ensemble.sdf, table.csv and run.json into DIR (checked "
                             "before any work; files confpop did not write are never replaced)")
    parser.add_argument("--into-nonempty-folder", action="store_true",
                        help="allow an --out folder holding files confpop did not write (they "
                             "stay; a taken name gets -2)")
    parser.add_argument("--json", action="store_true", help="print machine-readable JSON only")
    parser.add_argument("--quiet", action="store_true", help="no progress bars")


def _cap_workers(workers):
    """--workers: >= 1, and at most the CPUs this process may use (with a note)."""
    if workers is None:
        return None
    if workers < 1:
        raise InputError(f"--workers must be >= 1, got {workers}")
    from .execution import default_workers

    cores = default_workers()
    if workers > cores:
        print(f"{_PROG}: note: --workers {workers} is more than the {cores} CPU(s) this "
              f"process may use; using {cores}", file=sys.stderr)
        return cores
    return workers


def _temperatures(values) -> list:
    """--temperature values, checked; a value below 150 K gets a note (kelvin, not °C)."""
    from .thermo import check_temperatures

    temps = check_temperatures(values, "--temperature")
    low = [t for t in temps if t < 150.0]
    if low:
        print(f"{_PROG}: note: --temperature {low[0]:g} K is below 150 K; temperatures are in "
              f"kelvin ({low[0]:g} °C would be {low[0] + 273.15:g} K)", file=sys.stderr)
    return temps


def _check_search_cost(args) -> None:
    """Refuse, before any work, a search estimated above the bound (confpop.budget)."""
    from .budget import check_search_budget
    from .molecule import _load

    if args.method.lower() in ("mmff94", "mmff94s", "uff") and args.trials is None:
        return  # force-field searches are cheap; the estimate needs only the trials then
    mol = _load(args.input, charge=args.charge, multiplicity=args.multiplicity,
                keep_largest_fragment=args.keep_largest_fragment, stereo="ignore",
                method=None, name=None, warn_open_stereo=False)
    check_search_budget(mol, method=args.method, n_trials=args.trials,
                        allow_long=args.allow_long_run,
                        label=repr(args.input if len(args.input) <= 40 else args.input[:37] + "..."))


def _population_views(ens, temps, free: bool, dft: bool) -> dict:
    """Populations from each kind of energy asked for: {label: DataFrame (conformer x T)}."""
    views = {"E": ens.populations(temps, energy=ens.level)}
    if free:
        views["G"] = ens.populations(temps, energy="free")
    if dft:
        views["DFT"] = ens.populations(temps, energy="dft")
        if free:
            views["DFT+G"] = ens.populations(temps, energy="dft+free")
    return views


def _key_torsions(ens, count: int = 2):
    """The rotatable dihedrals that differ most between the conformers: [(label, atoms)]."""
    import numpy as np

    from .geometry import dihedral_at
    from .torsion import rotatable_torsions

    mol = ens.mol
    ids = ens.ids()
    scored = []
    for t in rotatable_torsions(mol):
        values = np.radians([dihedral_at(mol.GetConformer(c).GetPositions(), t.atoms) for c in ids])
        spread = 1.0 - abs(np.mean(np.exp(1j * values))) if len(values) else 0.0
        scored.append((spread, t.label, t.atoms))
    scored.sort(key=lambda s: -s[0])
    return [(label, atoms) for _, label, atoms in scored[:count]]


def _ensemble_table_text(ens, temps, views=None) -> str:
    from .geometry import dihedral_at

    rel = ens.energies("kcal/mol")
    views = views or {"": ens.populations(temps)}
    torsions = _key_torsions(ens)
    labels = [(name, t) for t in temps for name in views]
    head = f"{'conf':>4}  {'dE kcal/mol':>11}  {'deg':>3}  " + "  ".join(
        f"{'p' + ('_' + name if name else '') + '(' + format(t, 'g') + ' K)':>12}" for name, t in labels)
    head += "".join(f"  {label + ' (deg)':>18}" for label, _ in torsions)
    table = ens.table()
    species = table["species"] if "species" in table.columns and table["species"].nunique() > 1 else None
    if species is not None:
        head += f"  {'species':>7}"
    lines = [head]
    mol = ens.mol
    for cid in ens.ids():
        line = f"{cid:>4}  {rel[cid]:>11.2f}  {int(ens.degeneracy[cid]):>3}  " + "  ".join(
            f"{views[name].loc[cid, t]:>12.3f}" for name, t in labels)
        line += "".join(f"  {dihedral_at(mol.GetConformer(cid).GetPositions(), atoms):>18.0f}"
                        for _, atoms in torsions)
        if species is not None:
            line += f"  {int(species[cid]):>7}"
        lines.append(line)
    if species is not None:
        shares = ens.species(temps[0])
        lines.append("species (slow exchange: NMR sees each as its own set of signals; "
                     f"shares at {temps[0]:g} K): " + "; ".join(
                         f"{k}: {row['species_label']} {row[temps[0]]:.3f}" for k, row in shares.iterrows()))
    failed = [c for c in ens.ids(active=False) if c not in set(ens.ids())]
    table = ens.raw_table
    for cid in failed:
        lines.append(f"{cid:>4}  failed: {table.loc[cid, 'reason']}")
    return "\n".join(lines)


def _run_ensemble(args: argparse.Namespace) -> int:
    temps = _temperatures(args.temperature)
    if not 0.0 <= args.agreement <= 1.0:
        raise InputError(f"--agreement must be >= 0 and <= 1, got {args.agreement}")
    if not 0.0 <= args.completeness < 1.0:
        raise InputError(f"--completeness must be >= 0 and < 1, got {args.completeness}")
    if args.rounds < 1:
        raise InputError(f"--rounds must be >= 1, got {args.rounds}")
    if args.trials is not None and args.trials < 1:
        raise InputError(f"--trials must be >= 1, got {args.trials}")
    for option, value in (("--energy-window", args.energy_window),
                          ("--screen-window", args.screen_window)):
        if value is not None and value <= 0:
            raise InputError(f"{option} must be > 0 kcal/mol, got {value:g}")
    if args.screen_margin < 0:
        raise InputError(f"--screen-margin must be >= 0 kcal/mol, got {args.screen_margin:g}")
    if not 0.0 < args.min_population < 1.0:
        raise InputError(f"--min-population must lie between 0 and 1 (exclusive), "
                         f"got {args.min_population:g}")
    args.workers = _cap_workers(args.workers)
    _check_search_cost(args)
    progress = not (args.quiet or args.json) and sys.stderr.isatty()
    folder = None
    if args.out:  # created, locked and proved writable before any work
        from .outdir import OutputFolder
        folder = OutputFolder(args.out, kind="ensemble", option="--out",
                              allow_nonempty=args.into_nonempty_folder)
    try:
        return _ensemble_work(args, temps, progress, folder)
    finally:
        if folder is not None:
            folder.close()


def _ensemble_files(ens, temps, payload) -> dict:
    """{file name: write(path)} of one ensemble's output files."""
    def run_json(path):
        with open(path, "w") as fh:
            json.dump(payload, fh, indent=2)
            fh.write("\n")
    return {"ensemble.sdf": lambda path: ens.to_sdf(path),
            "table.csv": lambda path: ens.to_csv(path, temps), "run.json": run_json}


def _ensemble_work(args, temps, progress, folder) -> int:
    import os

    from .io import ensemble_json
    from .pipeline import search

    sources = [args.input]
    if args.enumerate_stereo:
        from .molecule import stereoisomers
        sources = stereoisomers(args.input, charge=args.charge,
                                keep_largest_fragment=args.keep_largest_fragment)
    results = []
    for source in sources:
        ens = search(source, method=args.method, solvent=args.solvent, seed=args.seed,
                     n_trials=args.trials, energy_window=args.energy_window,
                     temperatures=temps, min_population=args.min_population,
                     check_minima=not args.no_minimum_check, allow_long=args.allow_long_run,
                     screen_margin=args.screen_margin,
                     max_rounds=args.rounds, screen_window=args.screen_window,
                     target_completeness=args.completeness or None,
                     target_overlap=args.agreement or None, moves=not args.no_moves,
                     merge_mirror_images=not args.keep_mirror_images, charge=args.charge,
                     multiplicity=args.multiplicity, workers=args.workers, store=args.store,
                     keep_largest_fragment=args.keep_largest_fragment, progress=progress)
        if args.free_energy:
            ens = ens.add_free_energies(method=ens.level, temperatures=temps,
                                        low_mode=args.low_mode, workers=args.workers,
                                        progress=progress)
        if args.rescore:
            ens = ens.rescore(args.rescore, workers=args.workers, progress=progress, rank=False)
        results.append(ens)
    payloads = [ensemble_json(e, temps, input_text=args.input) for e in results]
    for payload, ens in zip(payloads, results):
        if len(ens) and (args.free_energy or args.rescore):
            views = _population_views(ens, temps, args.free_energy, bool(args.rescore))
            payload["populations"] = {name: {format(t, "g"): [float(df.loc[c, t]) for c in ens.ids()]
                                             for t in temps} for name, df in views.items()}
    if args.json and any(len(e) == 0 for e in results):
        raise CalculationFailed("every conformer failed: " + "; ".join(
            sorted(set(results[0].raw_table["reason"]))))
    written = []
    if folder is not None:
        for k, ens in enumerate(results):
            files = _ensemble_files(ens, temps, payloads[k])
            if len(results) == 1:
                for name, write in files.items():
                    name = folder.claim(name, key=f"file:{name}")
                    written.append(str(folder.write_file(name, write)))
            else:
                name = folder.claim(f"stereoisomer_{k + 1}", key=f"stereoisomer:{k + 1}")
                written.append(str(folder.write_folder(name, files)))
    if args.json:
        print(json.dumps(payloads[0] if len(payloads) == 1 else payloads, indent=2))
        return 0
    for ens in results:
        summary = next((p for p in ens.provenance if p.get("step") == "summary"), {})
        sample = next((p for p in ens.provenance if p.get("step") == "sample"), {})
        print(f"{ens.name}  method {ens.level}{'  solvent ' + ens.solvent if ens.solvent else ''}")
        if len(ens) == 0:
            for cid, row in ens.raw_table.iterrows():
                print(f"{cid:>4}  failed: {row['reason']}")
            print(f"{_PROG}: error: every conformer failed (reasons above)", file=sys.stderr)
            return 1
        views = (_population_views(ens, temps, args.free_energy, bool(args.rescore))
                 if (args.free_energy or args.rescore) else None)
        print(_ensemble_table_text(ens, temps, views))
        if views:
            print("p_E: from electronic energies at " + ens.level + "; "
                  + ("p_G: from G(T) = E + harmonic free-energy correction (" + args.low_mode
                     + ", standard state " + ("1 M" if ens.solvent else "1 bar") + "); "
                     if args.free_energy else "")
                  + ("p_DFT: from B3LYP-D3(BJ)/def2-SVPD single points at the same geometries"
                     + ("; p_DFT+G: DFT energy + the free-energy correction" if args.free_energy else "")
                     if args.rescore else ""))
        n_eff = ens.effective_count(temps[0])
        prune = next((p for p in ens.provenance if p.get("step") == "prune"), {})
        dropped = (f" ({prune['below_min_population']} rarer ones dropped, "
                   f"{100 * prune['population_dropped']:.2g} % of the population in all)"
                   if prune.get("below_min_population") else "")
        cut = (f"at or above {100 * args.min_population:g} % at {max(temps):g} K{dropped}"
               + (f" and within {args.energy_window:g} kcal/mol" if args.energy_window else ""))
        overlap = summary.get("stream_overlap")
        agreement = ("" if overlap is None else
                     f"two sampling streams agree to {overlap:.2f} (population overlap at the "
                     f"force field; target {summary.get('target_overlap')}, "
                     + ("reached" if summary.get("sampling_converged") else
                        f"NOT reached: {summary.get('sampling_stop')}") + "); ")
        print(f"{len(ens)} conformers {cut}; {agreement}sampling "
              f"completeness {100 * summary.get('completeness', float('nan')):.1f} % "
              f"(Good-Turing; {sample.get('trials', 0)} trials, {sample.get('rounds', 0)} rounds, "
              f"{sample.get('embedding_failures', 0)} embedding failures); effective number of "
              f"conformers at {temps[0]:g} K: {n_eff:.2f}; {summary.get('seconds', 0):.1f} s")
        stages = [p for p in ens.provenance if p.get("step") not in ("input", "summary")]
        print("stages: " + ", ".join(f"{p['step']} {p['n_in']}->{p['n_out']} ({p['seconds']:.1f} s)"
                                     for p in stages))
    if written:
        print(f"wrote {', '.join(os.path.basename(w) for w in written)} to "
              f"{os.path.abspath(args.out)}")
    print(_ENSEMBLE_CAUTION)
    return 0


# --------------------------------------------------------------------------- couplings

_COUPLINGS_CAUTION = (
    "Caution: Karplus equations reproduce measured vicinal couplings to about 0.5-1 Hz, and "
    "the populations behind these averages carry the energy method's error (see --energy-sigma)."
)


def _add_couplings(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("input", metavar="INPUT",
                        help="an ensemble SDF written by confpop, or a SMILES (then a conformer "
                             "search with default settings runs first)")
    parser.add_argument("--temperature", "-T", nargs="+", type=_finite_float, default=[298.15], action=_Once,
                        metavar="K", help="temperatures in kelvin (default 298.15); the fit uses the first")
    parser.add_argument("--observed", metavar="FILE.csv", default=None,
                        help="measured couplings, CSV columns atom_a, atom_b, J_hz [, sigma_hz] "
                             "(0-based hydrogen indices as printed); fits the populations")
    parser.add_argument("--parameters", default="auto",
                        help="Karplus set: auto (default: Haasnoot-de Leeuw-Altona for H-C-C-H, "
                             "Hu-Bax for amide H-N-C-H) or a set name, e.g. karplus-generic")
    parser.add_argument("--by", choices=("group", "pair"), default="group",
                        help="one row per group of equivalent protons (default) or per proton pair")
    parser.add_argument("--energy-sigma", type=_finite_float, default=None, metavar="KCAL",
                        help="add a Monte Carlo spread (5-95 %%) from this per-conformer energy "
                             "error in kcal/mol (1 is typical for GFN2-xTB)")
    parser.add_argument("--species", type=int, default=None, metavar="N",
                        help="with --observed: fit only species N (conformers separated by a slow "
                             "amide or biaryl rotation give separate signal sets; numbers as printed)")
    parser.add_argument("--method", default="gfn2", help="method for a SMILES input (default gfn2)")
    parser.add_argument("--solvent", default=None, help="implicit solvent for a SMILES input")
    parser.add_argument("--seed", type=int, default=0, help="seed for sampling, spread and bootstrap")
    parser.add_argument("--energy-property", default=None, metavar="NAME",
                        help="for an SDF ensemble from another program: the SD property "
                             "holding each conformer's energy (needs --energy-unit)")
    parser.add_argument("--energy-unit", default=None, metavar="UNIT",
                        help="unit of those energies (or of the numbers on XYZ comment lines): "
                             "kcal/mol, kJ/mol, hartree, eV or cm-1")
    parser.add_argument("--uniform-weights", action="store_true",
                        help="accept an ensemble file without energies and weight its "
                             "conformers equally (default: refuse)")
    parser.add_argument("--plot", metavar="FILE.png", default=None,
                        help="write a figure: predicted vs observed with --observed, else J vs temperature")
    parser.add_argument("--json", action="store_true", help="print machine-readable JSON only")


def _plain(value):
    """A JSON-ready Python value from a table cell (tuples of indices, numpy scalars)."""
    if isinstance(value, tuple):
        return [_plain(v) for v in value]
    if hasattr(value, "item"):
        value = value.item()
    if isinstance(value, float):
        return _json_number(value)
    return value


def _check_plot_path(path) -> None:
    """--plot: a writable place and a format matplotlib knows, checked before any work."""
    import os

    from .outdir import check_output_file

    check_output_file(path, "--plot")
    suffix = os.path.splitext(str(path))[1].lstrip(".").lower()
    known = ("png", "pdf", "svg", "svgz", "eps", "ps", "jpg", "jpeg", "tif", "tiff", "webp")
    if suffix not in known:
        raise InputError(f"--plot {str(path)!r}: the file name must end in one of "
                         f"{', '.join('.' + k for k in known)} (the figure format follows it)")


def _read_observed(path):
    import pandas as pd

    try:
        return pd.read_csv(path)
    except FileNotFoundError:
        raise InputError(f"--observed file {str(path)!r} does not exist") from None
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise InputError(f"--observed file {str(path)!r} cannot be read as CSV: {exc}") from None


def _couplings_ensemble(args):
    from pathlib import Path

    if Path(args.input).is_file():
        from .io import read_ensemble
        return read_ensemble(args.input, energy_property=args.energy_property,
                             unit=args.energy_unit, uniform_weights=args.uniform_weights)
    if args.energy_property or args.energy_unit or args.uniform_weights:
        raise InputError(f"--energy-property, --energy-unit and --uniform-weights apply to an "
                         f"ensemble file; {args.input!r} is not a file")
    from .pipeline import search
    return search(args.input, method=args.method, solvent=args.solvent, seed=args.seed,
                  progress=False)


def _run_couplings(args: argparse.Namespace) -> int:
    from . import nmr

    temps = _temperatures(args.temperature)
    if args.plot:
        _check_plot_path(args.plot)
    observed = None
    if args.observed:  # read before any work: a bad file fails at once
        observed = _read_observed(args.observed)
    ens = _couplings_ensemble(args)
    import warnings
    warnings.simplefilter("ignore", nmr.MethodWarning)  # printed below as "method caution:"
    table = nmr.average_couplings(ens, temps, parameters=args.parameters, by=args.by)
    id_cols = [c for c in table.columns if not isinstance(c, float)]
    species = table.attrs.get("species", {})
    if args.species is not None and not args.observed:
        raise InputError("--species chooses the signal set to fit and needs --observed FILE.csv")
    if args.species is not None and args.species not in species:
        raise InputError(f"--species must be one of {sorted(species)} (as printed), got {args.species}")
    cautions = nmr.method_cautions(ens)
    spread = None
    if args.energy_sigma is not None:
        spread = nmr.coupling_spread(ens, temps, parameters=args.parameters, by=args.by,
                                     energy_sigma=args.energy_sigma, seed=args.seed)
    fit = None
    if observed is not None:
        fit = nmr.fit_populations(ens, observed, temperature=temps[0], parameters=args.parameters,
                                  seed=args.seed, species=args.species)
    if args.plot:
        from . import plot
        if fit is not None:
            plot.coupling_parity_plot(fit, path=args.plot)
        else:
            plot.coupling_temperature_plot(table, path=args.plot)

    if args.json:
        rows = []
        for _, row in table.iterrows():
            item = {c: _plain(row[c]) for c in id_cols}
            item["J_hz"] = {format(t, "g"): _json_number(row[t]) for t in temps}
            rows.append(item)
        payload = {"temperatures_K": temps, "parameters": args.parameters, "by": args.by,
                   "species": [{"species": int(k), "label": v["label"],
                                "share": {format(t, "g"): _json_number(x) for t, x in v["share"].items()}}
                               for k, v in species.items()],
                   "couplings": rows, "caution": _COUPLINGS_CAUTION,
                   "method_cautions": [c.message for c in cautions]}
        if spread is not None:
            payload["spread"] = {"energy_sigma_kcal_mol": args.energy_sigma, "rows": [
                {"key": r["group"] if args.by == "group" else r["label"],
                 "species": int(r["species"]), "temperature_K": r["temperature"],
                 **{k: _json_number(r[k]) for k in ("value", "mean", "std", "p05", "p95")}}
                for _, r in spread.iterrows()]}
        if fit is not None:
            frame = fit.to_frame()
            payload["fit"] = {
                "temperature_K": fit.temperature, "chi2": fit.chi2,
                "chi2_boltzmann": fit.chi2_boltzmann, "n_observations": fit.n_observations,
                "rms_deviation_hz": _json_number(fit.rms_deviation), "warning": fit.warning,
                "minimal_subset": list(fit.minimal_subset) if fit.minimal_subset else None,
                "free_energy_unit": fit.unit,
                "conformers": [{"conformer": int(cid), **{k: _json_number(v) for k, v in r.items()}}
                               for cid, r in frame.iterrows()],
                "residuals": [{k: _plain(v) for k, v in r.items()}
                              for _, r in fit.residuals.iterrows()],
                "families": [{k: _plain(v) for k, v in r.items()}
                             for _, r in fit.families.iterrows()],
            }
        print(json.dumps(payload, indent=2, ensure_ascii=False, default=str))
        return 0

    key = "group" if args.by == "group" else "label"
    width = max(len(key), *(len(str(v)) for v in table[key])) if len(table) else len(key)
    lines = [f"{len(ens)} conformers ({ens.level}); population-averaged vicinal 3J(H,H) in Hz; "
             "atom indices 0-based",
             f"{key:<{width}}  {'set':<16}" + "".join(f"  {format(t, 'g') + ' K':>9}" for t in temps)]
    for number, sub in table.groupby("species", sort=True):
        if len(species) > 1:
            info = species[int(number)]
            lines.append(f"species {int(number)} ({info['label']}): "
                         + ", ".join(f"{info['share'][t]:.2f} of the population at {t:g} K"
                                     for t in temps)
                         + "; slow exchange with the other species, averaged within it only")
        for _, row in sub.iterrows():
            lines.append(f"{str(row[key]):<{width}}  {str(row['parameter_set']):<16}"
                         + "".join(f"  {row[t]:>9.2f}" for t in temps))
    if spread is not None:
        lines.append(f"spread from a {args.energy_sigma:g} kcal/mol energy error "
                     f"(Monte Carlo, at {temps[0]:g} K): 5-95 % interval in Hz")
        for _, r in spread[spread["temperature"] == temps[0]].iterrows():
            where = f"  (species {int(r['species'])})" if len(species) > 1 else ""
            lines.append(f"{str(r[key]):<{width}}  {r['p05']:>6.2f} - {r['p95']:<6.2f}{where}")
    if fit is not None:
        lines.append(f"fit to {fit.n_observations} observations at {fit.temperature:g} K: "
                     f"chi2 {fit.chi2:.2f} (Boltzmann populations: {fit.chi2_boltzmann:.2f}); "
                     f"rms deviation {fit.rms_deviation:.2f} Hz")
        lines.append(f"{'conf':>4}  {'fitted':>7}  {'± std':>6}  {'Boltzmann':>9}  "
                     f"{'implied dG ' + fit.unit:>20}")
        for cid, r in fit.to_frame().iterrows():
            dg = "inf" if not math.isfinite(r["free_energy"]) else f"{r['free_energy']:.2f}"
            lines.append(f"{cid:>4}  {r['population']:>7.3f}  {r['population_std']:>6.3f}  "
                         f"{r['boltzmann']:>9.3f}  {dg:>20}")
        lines.append(f"{'observed':>24}  {'obs':>6}  {'fit':>6}  {'Boltz':>6}")
        for _, r in fit.residuals.iterrows():
            lines.append(f"{r['kind'] + ' ' + str(r['atom_a']) + '-' + str(r['atom_b']):>24}  "
                         f"{r['observed']:>6.2f}  {r['predicted']:>6.2f}  {r['boltzmann']:>6.2f}")
        if fit.minimal_subset:
            lines.append(f"smallest conformer set explaining the data within the noise: "
                         f"{list(fit.minimal_subset)} (chi2 {fit.minimal_subset_chi2:.2f})")
        fixed = fit.families[fit.families["determined"]] if fit.families is not None else []
        if len(fixed):
            lines.append("rotamer families the data determine (population ± bootstrap std; "
                         "g+ 0..120, g- -120..0, t beyond ±120 degrees):")
            for r in fixed.itertuples():
                lines.append(f"{r.torsion:>24}  {r.family:<3} {r.population:6.3f} ± "
                             f"{r.population_std:5.3f}  (Boltzmann {r.boltzmann:.3f})")
        if fit.warning:
            lines.append("warning: " + fit.warning)
    if args.plot:
        lines.append(f"wrote {args.plot}")
    for c in cautions:
        lines.append("method caution: " + c.message)
    lines.append(_COUPLINGS_CAUTION)
    print("\n".join(lines))
    return 0


# --------------------------------------------------------------------------- batch

_BATCH_EPILOG = (
    "Exit status: 0 when every molecule succeeded; 1 when some (or all) molecules failed "
    "but the batch ran to the end (the others' files are written; failures.csv and the "
    "printed failure list say why); 2 on an input error that stops the batch before any "
    "search (unreadable batch file, no SMILES column, unknown method, unusable --store or "
    "--out, unreachable --scheduler); 130 when interrupted by Ctrl-C (SIGINT), 143 by SIGTERM, "
    "129 by SIGHUP: the workers are stopped and finished molecules keep their files."
)


def _add_batch(parser: argparse.ArgumentParser) -> None:
    parser.epilog = _BATCH_EPILOG
    parser.add_argument("input", metavar="FILE",
                        help="molecules to search: .smi (SMILES [name] per line, # comments), "
                             ".csv/.tsv (a 'smiles' column, optional 'name' or 'id' column) or "
                             ".sdf (one molecule per record, named by its title)")
    parser.add_argument("--out", required=True, metavar="DIR",
                        help="folder for one subfolder per molecule (ensemble.sdf, table.csv, "
                             "run.json) plus summary.csv and failures.csv; checked and locked "
                             "before any work; a rerun keeps the earlier molecules' rows")
    parser.add_argument("--into-nonempty-folder", action="store_true",
                        help="allow an --out folder holding files confpop did not write (they "
                             "are never replaced; a taken name gets -2)")
    parser.add_argument("--method", default="gfn2",
                        help="final level: gfn2 (default), gfn1, gfnff, tblite-gfn2, mmff94s, mmff94, uff")
    parser.add_argument("--solvent", default=None,
                        help="implicit solvent for tight-binding methods, e.g. water, chloroform")
    parser.add_argument("--temperature", "-T", nargs="+", type=_finite_float, default=[298.15], action=_Once,
                        metavar="K", help="temperatures in kelvin (default 298.15); the "
                                          "effective number of conformers is at the first")
    parser.add_argument("--seed", type=int, default=0, help="sampling seed (default 0)")
    parser.add_argument("--min-population", type=_finite_float, default=_MIN_POPULATION,
                        metavar="SHARE",
                        help="drop a conformer only when its population at the highest "
                             f"--temperature is below this share (default {_MIN_POPULATION:g})")
    parser.add_argument("--energy-window", type=_finite_float, default=None, metavar="KCAL",
                        help="also drop conformers more than this above the lowest, kcal/mol "
                             "(default: none)")
    parser.add_argument("--workers", type=int, default=None,
                        help="local worker processes (default: all cores, and at most that; "
                             "1 = serial)")
    parser.add_argument("--allow-long-run", action="store_true",
                        help="search molecules whose estimated cost is above 2 CPU hours "
                             "(default: such a molecule fails with the estimate as reason)")
    parser.add_argument("--scheduler", default=None, metavar="ADDRESS",
                        help="run on a dask.distributed cluster, e.g. tcp://10.0.0.5:8786 "
                             "(start its workers with OMP_NUM_THREADS=1)")
    parser.add_argument("--scheduler-timeout", type=_finite_float, default=10.0, metavar="SECONDS",
                        help="how long to wait for the scheduler to answer (default 10 s)")
    parser.add_argument("--parallel", choices=("auto", "molecules", "conformers"), default="auto",
                        help="spread whole molecules (best for many small ones) or each "
                             "molecule's conformers over the workers; auto (default): "
                             "molecules when there are at least as many as workers")
    parser.add_argument("--store", default=None, metavar="FILE",
                        help="SQLite result store: a batch run again or resumed recomputes nothing finished")
    parser.add_argument("--json", action="store_true", help="print machine-readable JSON only")
    parser.add_argument("--quiet", action="store_true", help="no progress bars")
    parser.add_argument("--progress", action="store_true",
                        help="progress bars on stderr even when it is not a terminal")


def _dask_client(address: str, timeout: float):
    """A dask.distributed Client connected to ``address``, or a one-line error."""
    from .errors import BackendUnavailable

    if timeout <= 0:
        raise InputError(f"--scheduler-timeout must be > 0 s, got {timeout:g}")
    try:
        from distributed import Client
    except ImportError as exc:
        raise BackendUnavailable("--scheduler needs dask.distributed (pip install "
                                 f"'confpop[dask]' or 'dask[distributed]'): {exc}") from None
    try:
        return Client(address, timeout=timeout)
    except Exception as exc:  # OSError/TimeoutError when nobody answers, ValueError for a bad address
        raise InputError(f"cannot connect to the dask scheduler at {address!r} within "
                         f"{timeout:g} s: {type(exc).__name__}: {exc}") from None


def _batch_table_text(summary, temps) -> str:
    import pandas as pd

    width = max([4] + [len(str(n)) for n in summary["name"]])
    head = (f"{'name':<{width}}  {'status':<6}  {'conf':>4}  {'lowest':>6}  "
            f"{'n_eff(' + format(temps[0], 'g') + ' K)':>14}  "
            + "  ".join(f"{'top-3 p(' + format(t, 'g') + ' K)':>17}" for t in temps)
            + f"  {'seconds':>8}")
    lines = [head]
    for _, row in summary.iterrows():
        def cell(value, fmt):
            return "-" if pd.isna(value) else format(value, fmt)
        tops = []
        for t in temps:
            values = [row[f"population_top{r}_{t:g}K"] for r in (1, 2, 3)]
            tops.append("/".join(cell(v, ".2f") for v in values))
        lines.append(f"{str(row['name']):<{width}}  {row['status']:<6}  {int(row['conformers']):>4}  "
                     f"{cell(row['lowest_conformer'], 'd'):>6}  {cell(row['effective_count'], '.2f'):>14}  "
                     + "  ".join(f"{t:>17}" for t in tops) + f"  {row['seconds']:>8.1f}")
    return "\n".join(lines)


def _batch_records(frame) -> list[dict]:
    """DataFrame rows as JSON-ready dicts (NaN and <NA> as null)."""
    import pandas as pd

    rows = []
    for record in frame.to_dict(orient="records"):
        rows.append({k: (None if (not isinstance(v, str) and pd.isna(v)) else _plain(v))
                     for k, v in record.items()})
    return rows


def _run_batch(args: argparse.Namespace) -> int:
    import os
    import time

    from .batch import read_batch_input, search_many

    temps = _temperatures(args.temperature)
    if args.scheduler is not None and args.workers is not None:
        raise InputError("give either --scheduler or --workers, not both")
    args.workers = _cap_workers(args.workers)
    molecules = read_batch_input(args.input)
    progress = not args.quiet and (args.progress or (sys.stderr.isatty() and not args.json))
    client = _dask_client(args.scheduler, args.scheduler_timeout) if args.scheduler else None
    start = time.perf_counter()
    try:
        result = search_many(molecules, method=args.method, solvent=args.solvent, seed=args.seed,
                             temperatures=temps, executor=client, workers=args.workers,
                             store=args.store, progress=progress, out_dir=args.out,
                             parallel=args.parallel, energy_window=args.energy_window,
                             min_population=args.min_population,
                             into_nonempty_folder=args.into_nonempty_folder,
                             allow_long=args.allow_long_run)
    finally:
        if client is not None:
            client.close()
    seconds = time.perf_counter() - start
    status = 0 if result.n_failed == 0 else 1
    out = os.path.abspath(args.out)
    if args.json:
        payload = {"input": args.input, "method": args.method.lower(), "solvent": args.solvent,
                   "seed": args.seed, "temperatures": temps, "parallel": result.parallel,
                   "out": out, "seconds": round(seconds, 3), "ok": result.n_ok,
                   "failed": result.n_failed, "molecules": _batch_records(result.summary),
                   "failures": _batch_records(result.failures), "caution": _ENSEMBLE_CAUTION}
        print(json.dumps(payload, indent=2, ensure_ascii=False))
        return status
    where = (f"dask scheduler {args.scheduler}" if args.scheduler else
             "1 process" if args.workers == 1 else
             f"{args.workers or 'all'} local worker{'' if args.workers == 1 else 's'}")
    print(f"{len(result.summary)} molecules from {args.input}: {result.n_ok} ok, "
          f"{result.n_failed} failed; method {args.method.lower()}"
          f"{'  solvent ' + args.solvent if args.solvent else ''}; parallel over "
          f"{result.parallel} on {where}; {seconds:.1f} s")
    from .batch import _printable

    shown = result.summary.assign(name=result.summary["name"].map(lambda n: _printable(str(n))))
    print(_batch_table_text(shown, temps))
    if result.n_failed:
        print("failures:")
        for _, row in result.failures.iterrows():
            message = _printable(" ".join(str(row["message"]).split()))
            print(f"  {_printable(str(row['name']))}: {row['error_type']}: {message}")
    tables = ", ".join(os.path.basename(p) for p in result.tables.values())
    print(f"wrote {tables} and one folder per molecule to {out}")
    print(_ENSEMBLE_CAUTION)
    return status


# --------------------------------------------------------------------------- scan

_SCAN_CAUTION = (
    "Caution: barriers are scan energies standing in for ΔG‡ (no zero-point, thermal or "
    "entropy terms); that typically errs by about ±1 kcal/mol at room temperature, a factor of "
    "about 5 in k and t1/2, on top of the method's own error."
)


def _add_scan(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("input", metavar="INPUT",
                        help="a SMILES, or a MOL/SDF/XYZ file (its first structure is the start)")
    which = parser.add_mutually_exclusive_group(required=True)
    which.add_argument("--torsion", nargs=4, type=int, metavar=("I", "J", "K", "L"),
                       help="the dihedral I-J-K-L to scan; 0-based atom indices as in RDKit "
                            "(hydrogens included; for SMILES input they follow the heavy atoms)")
    which.add_argument("--bond", nargs=2, type=int, metavar=("J", "K"),
                       help="the bond J-K to turn (0-based indices); I and L are chosen, heavy "
                            "atoms preferred")
    parser.add_argument("--method", default="gfn2",
                        help="energy method: gfn2 (default), gfn1, gfnff, tblite-gfn2, mmff94s, "
                             "mmff94, uff, model")
    parser.add_argument("--solvent", default=None,
                        help="implicit solvent for tight-binding methods, e.g. water, chloroform")
    parser.add_argument("--step", type=_finite_float, default=15.0, metavar="DEG",
                        help="grid step in degrees; must divide 360 (default 15)")
    parser.add_argument("--rigid", action="store_true",
                        help="rigid scan: turn one fragment, optimize nothing (fast; barriers too high)")
    parser.add_argument("--convergence", default="tight",
                        choices=["loose", "normal", "tight", "verytight"],
                        help="optimizer convergence at each point (default tight)")
    parser.add_argument("--temperature", "-T", nargs="+", type=_finite_float, default=[298.15], action=_Once,
                        metavar="K", help="temperatures in kelvin for the rates (default 298.15)")
    parser.add_argument("--delta-nu", metavar="HZ", type=_finite_float, default=100.0,
                        help="NMR signal separation in Hz for the exchange regime (default 100)")
    parser.add_argument("--unit", default="kcal/mol",
                        help='energy unit: "kcal/mol" (default), "kJ/mol", "hartree", "eV", "cm-1"')
    parser.add_argument("--charge", type=int, default=None, help="total charge (default: from the input)")
    parser.add_argument("--multiplicity", type=int, default=None,
                        help="spin multiplicity 2S+1 (default: from the input's radicals)")
    parser.add_argument("--workers", type=int, default=None,
                        help="processes for the two walks of a relaxed scan (default 2 when two "
                             "cores are free to use, else 1)")
    parser.add_argument("--plot", default=None, metavar="FILE.png",
                        help="draw the profile (minima, maxima, barriers) to this file")
    parser.add_argument("--json", action="store_true", help="print machine-readable JSON only")


def _angle_text(value: float) -> str:
    """Degrees to one decimal, without a "-0.0"."""
    value = round(float(value), 1)
    return f"{value + 0.0:.1f}"


def _run_scan(args: argparse.Namespace) -> int:
    import time

    from . import kinetics
    from .execution import default_workers, local_executor
    from .molecule import load_molecule
    from .torsion import _check_dihedral_atoms, scan_torsion, torsion_for_bond
    from .units import normalize_unit

    unit = normalize_unit(args.unit)
    temps = list(args.temperature)
    bad = [t for t in temps if t <= 0.0]
    if bad:
        raise InputError(f"--temperature must be > 0 K, got {bad[0]:g}")
    if args.delta_nu <= 0.0:
        raise InputError(f"--delta-nu must be > 0 Hz, got {args.delta_nu:g}")
    if args.plot:
        _check_plot_path(args.plot)
    if not 1.0 <= args.step <= 180.0:  # 0.001 deg asked for 360000 optimizations (960 MB)
        raise InputError(f"--step must be between 1 and 180 degrees, got {args.step:g}")
    workers = _cap_workers(args.workers)
    if workers is None:
        workers = 2 if default_workers() >= 2 else 1
    if isinstance(workers, bool) or workers < 1:
        raise InputError(f"--workers must be >= 1, got {workers}")
    mol = load_molecule(args.input, charge=args.charge, multiplicity=args.multiplicity)
    if args.bond is not None:
        atoms = torsion_for_bond(mol, *args.bond).atoms
    else:
        atoms = _check_dihedral_atoms(mol, args.torsion)
    labels = [f"{mol.GetAtomWithIdx(a).GetSymbol()}{a}" for a in atoms]

    started = time.perf_counter()
    executor = local_executor(workers) if (workers > 1 and not args.rigid) else None
    try:
        profile = scan_torsion(mol, atoms, method=args.method, solvent=args.solvent,
                               step=args.step, relaxed=not args.rigid,
                               convergence=args.convergence, executor=executor, unit=unit,
                               charge=args.charge, multiplicity=args.multiplicity)
    finally:
        if executor is not None:
            executor.shutdown()
    seconds = time.perf_counter() - started
    if args.plot:
        from .plot import plot_torsion_profile
        plot_torsion_profile(profile, path=args.plot)

    rates = profile.rates(temps, delta_nu_hz=args.delta_nu)
    if args.json:
        payload = profile.to_dict(temps, delta_nu_hz=args.delta_nu)
        payload.update({"input": args.input, "atom_labels": labels, "index_base": 0,
                        "delta_nu_hz": args.delta_nu, "temperatures": temps,
                        "seconds": seconds, "plot": args.plot,
                        "atropisomer_class_37C": profile.atropisomer_class(),
                        "caution": _SCAN_CAUTION})
        print(json.dumps(payload, indent=2, ensure_ascii=False, default=_json_number))
        return 0

    kind = "rigid" if args.rigid else f"relaxed ({args.convergence})"
    n_extra = int(profile.refined.sum())
    lines = [
        f"Torsion {'-'.join(labels)}  (0-based atom indices {' '.join(map(str, atoms))}; "
        f"bond {labels[1]}-{labels[2]} turns)",
        f"{kind} scan, {args.method.lower()}{'  solvent ' + args.solvent if args.solvent else ''}, "
        f"step {args.step:g} deg: {len(profile.angles) - n_extra} points"
        f"{f' + {n_extra} at fitted extrema' if n_extra else ''}, "
        f"{int((~profile.converged).sum())} not converged, {profile.gradient_calls} gradient "
        f"calls, {seconds:.1f} s",
        f"fit: Fourier series to order {profile.fit_order}, rms deviation "
        f"{profile.fit_rmsd():.3f} {unit}",
        "",
        f"{'minima':<8} {'angle/deg':>10} {'E/' + unit:>12}",
    ]
    for _, r in profile.minima().iterrows():
        lines.append(f"{'':<8} {_angle_text(r['angle']):>10} {r['energy']:>12.2f}")
    lines.append(f"{'maxima':<8} {'angle/deg':>10} {'E/' + unit:>12}")
    for _, r in profile.maxima().iterrows():
        lines.append(f"{'':<8} {_angle_text(r['angle']):>10} {r['energy']:>12.2f}")
    lines += ["", f"barriers between neighbouring minima ({unit}) and rates "
                  f"(NMR regime for Δν = {args.delta_nu:g} Hz):",
              f"{'from':>7} {'to':>7} {'via':>7} {'forward':>8} {'reverse':>8} {'T/K':>7} "
              f"{'k_fwd/s^-1':>11} {'t1/2 fwd':>10} {'t1/2 rev':>10}  NMR"]
    for _, r in rates.iterrows():
        lines.append(
            f"{_angle_text(r['from_min']):>7} {_angle_text(r['to_min']):>7} "
            f"{_angle_text(r['via_max']):>7} "
            f"{r['barrier_forward']:>8.2f} {r['barrier_reverse']:>8.2f} {r['temperature']:>7.2f} "
            f"{r['k_forward']:>11.3e} {kinetics.format_duration(r['half_life_forward']):>10} "
            f"{kinetics.format_duration(r['half_life_reverse']):>10}  {r['exchange_regime']}")
    inter = profile.interconversion_barrier()
    lines += ["", f"all minima interconvert over {inter:.2f} {unit} (atropisomer class "
                  f"{profile.atropisomer_class()} at 37 °C); a full turn needs "
                  f"{profile.full_rotation_barrier():.2f} {unit}"]
    if profile.hysteresis:
        lines.append("hysteresis: the up and down walks differ at "
                     + ", ".join(f"{a:g} deg ({d:.2f} {unit})" for a, d in profile.hysteresis)
                     + " (a neighbouring group changed during the scan; the lower energy is kept)")
    else:
        lines.append(f"hysteresis: none (up and down walks agree within "
                     f"{profile.hysteresis_threshold:.2f} {unit})")
    if args.plot:
        lines.append(f"profile drawn to {args.plot}")
    lines.append(_SCAN_CAUTION)
    print("\n".join(lines))
    return 0


# --------------------------------------------------------------------------- registry

_COMMANDS: list[tuple] = [
    ("batch", _add_batch, _run_batch,
     "search many molecules from a .smi/.csv/.sdf file: one folder each, a summary and a failure list"),
    ("couplings", _add_couplings, _run_couplings,
     "population-averaged vicinal couplings; fit populations to measured couplings"),
    ("ensemble", _add_ensemble, _run_ensemble,
     "find, rank and weight the conformers of a molecule at several temperatures"),
    ("rates", _add_rates, _run_rates,
     "rates, half-lives, atropisomer classes and NMR exchange regimes from barriers"),
    ("scan", _add_scan, _run_scan,
     "torsion scan: minima, maxima, barriers and interconversion rates about one bond"),
]


_EXIT_STATUS = (
    "Exit status: 0 on success; 1 when the calculation ran but gave no result (every "
    "conformer failed) or on an internal error; 2 on an input error, reported as one line "
    "before any work where it can be checked first (options, input files, --out, --plot, "
    "--store); 130 when interrupted by Ctrl-C (SIGINT), 143 by SIGTERM and 129 by SIGHUP: "
    "worker processes are stopped, the --store keeps every finished calculation and no "
    "partial output file is left."
)


def _build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog=_PROG,
        description="Conformer ensembles: populations, interconversion rates and NMR observables.",
        epilog=_EXIT_STATUS,
    )
    parser.add_argument("--version", action="version", version=f"{_PROG} {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name, add_arguments, run, help_text in _COMMANDS:
        command_parser = sub.add_parser(name, help=help_text, description=help_text,
                                        epilog=_EXIT_STATUS)
        add_arguments(command_parser)
        command_parser.set_defaults(_run=run)
    return parser


class Terminated(KeyboardInterrupt):
    """SIGTERM or SIGHUP, raised in the main thread so that a run ends as after Ctrl-C."""

    def __init__(self, signum: int):
        super().__init__(signum)
        self.signum = signum


def _raise_terminated(signum, frame):
    import signal

    # the clean-up that follows must not be cut short by a second signal
    for name in ("SIGTERM", "SIGHUP"):
        if hasattr(signal, name):
            signal.signal(getattr(signal, name), signal.SIG_IGN)
    raise Terminated(signum)


def _install_signal_handlers() -> dict:
    """SIGTERM/SIGHUP -> Terminated (main thread only); returns the handlers to restore."""
    import signal
    import threading

    if threading.current_thread() is not threading.main_thread():
        return {}
    previous = {}
    for name in ("SIGTERM", "SIGHUP"):
        number = getattr(signal, name, None)
        if number is not None:
            previous[number] = signal.signal(number, _raise_terminated)
    return previous


def _show_warning(message, category, filename, lineno, file=None, line=None):
    """Our cautions as one line each; other libraries' warnings as usual."""
    from .errors import ConfpopWarning

    if issubclass(category, ConfpopWarning):
        print(f"{_PROG}: warning: {' '.join(str(message).split())}", file=sys.stderr)
    else:
        _default_show_warning(message, category, filename, lineno, file, line)


def main(argv=None) -> int:
    """Run the ``confpop`` command line; return the exit status.

    Parameters
    ----------
    argv : list of str, optional
        Arguments without the program name (default: ``sys.argv[1:]``).

    Returns
    -------
    int
        0 on success, 1 when no result came out, 2 on an input error (reported as one line
        on stderr), 130 after Ctrl-C, 128 + the signal number after SIGTERM or SIGHUP.
    """
    import signal
    import warnings

    previous = _install_signal_handlers()
    try:
        with warnings.catch_warnings():
            warnings.showwarning = _show_warning
            return _main(argv)
    finally:
        for number, handler in previous.items():
            signal.signal(number, handler)


def _main(argv) -> int:
    parser = _build_parser()
    try:
        try:
            args = parser.parse_args(argv)
        except SystemExit as stop:  # --help and --version
            return int(stop.code or 0)
        if getattr(args, "_run", None) is None:
            names = ", ".join(name for name, *_ in _COMMANDS)
            raise InputError(f"a command is required: one of {names} (see confpop --help)")
        return int(args._run(args) or 0)
    except BrokenPipeError:  # output piped into head or similar
        sys.stderr.close()
        return 0
    except (ConfpopError, ValueError, OSError) as err:
        message = " ".join(str(err).split()) or type(err).__name__
        message = "".join(ch if ch.isprintable() else f"\\x{ord(ch):02x}" for ch in message)
        print(f"{_PROG}: error: {message}", file=sys.stderr)
        return 2
    except KeyboardInterrupt as stop:
        import signal

        signum = getattr(stop, "signum", signal.SIGINT)
        what = "interrupted" if signum == signal.SIGINT else \
            f"terminated by {signal.Signals(signum).name}"
        print(f"{_PROG}: {what} (worker processes stopped; finished calculations are kept in "
              "the --store file, if one was given)", file=sys.stderr)
        return 128 + int(signum)
    except Exception as err:  # a bug: one line, the traceback only on request
        import os
        if os.environ.get("CONFPOP_DEBUG"):
            raise
        message = " ".join(str(err).split())[:300]
        print(f"{_PROG}: internal error: {type(err).__name__}: {message} (please report it; "
              "set CONFPOP_DEBUG=1 to see the traceback)", file=sys.stderr)
        return 1
