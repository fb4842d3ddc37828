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
from .settings import SEARCH_DEFAULTS as _SEARCH_DEFAULTS

__all__ = ["main"]

_PROG = "confpop"
_default_show_warning = _warnings.showwarning


class _Parser(argparse.ArgumentParser):
    """An argument parser whose usage errors become one-line InputErrors (handled in main)."""

    def error(self, message):  # noqa: D401 - argparse hook
        raise InputError(message)


# the search's defaults, from confpop.settings (standard library only, so parsing the
# command line does not load RDKit)
_MAX_ROUNDS = _SEARCH_DEFAULTS.max_rounds
_TARGET_COMPLETENESS = _SEARCH_DEFAULTS.target_completeness
_MIN_POPULATION = _SEARCH_DEFAULTS.min_population
_SCREEN_MARGIN = _SEARCH_DEFAULTS.screen_margin
_TARGET_OVERLAP = _SEARCH_DEFAULTS.target_overlap


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


_CELSIUS = ("c", "degc", "°c", "ºc", "celsius")


def _temperature_arg(text: str) -> float:
    """A --temperature value: kelvin, or °C when written with the unit (25C, 25degC, 25°C);
    298.15K is accepted too."""
    import re

    match = re.fullmatch(r"\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*([^\d\s].*)?\s*",
                         str(text))
    if not match:
        raise argparse.ArgumentTypeError(f"expected a temperature such as 298.15 (kelvin) or "
                                         f"25C (degrees Celsius), got {text!r}")
    value, unit = float(match.group(1)), (match.group(2) or "").strip().lower()
    if unit in _CELSIUS:
        value += 273.15
    elif unit not in ("", "k"):
        raise argparse.ArgumentTypeError(f"unknown temperature unit in {text!r}: write kelvin "
                                         f"(298.15 or 298.15K) or degrees Celsius (25C, 25degC)")
    if not math.isfinite(value):
        raise argparse.ArgumentTypeError(f"expected a finite temperature, got {text!r}")
    return round(value, 6)


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
        "--temperature", "-T", metavar="T", nargs="+", type=_temperature_arg, default=[298.15], action=_Once,
        help="temperature(s) in K (default 298.15); °C when written with the unit, e.g. 25C",
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
                        help="implicit solvent, e.g. water, chloroform: GBSA with gfn2/gfn1/gfnff (xtb-python), ALPB with tblite-gfn2/tblite-gfn1; force fields have none")
    parser.add_argument("--temperature", "-T", nargs="+", type=_temperature_arg, default=[298.15], action=_Once,
                        metavar="K", help="temperatures in kelvin (default 298.15); °C when written with the unit, e.g. 25C")
    parser.add_argument("--seed", type=int, default=0, help="sampling seed (default 0)")
    parser.add_argument("--trials", type=int, default=None,
                        help="trial structures per sampling round (default: from flexibility; "
                             "more than 10000 needs --allow-long-run)")
    parser.add_argument("--allow-long-run", action="store_true",
                        help="run a search whose estimated cost is above 2 CPU hours (the "
                             "estimate, from atoms, rotatable bonds, trials, moves and method, "
                             "is printed in the refusal)")
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
                        help="write ensemble.sdf, table.csv, run.json, populations.png "
                             "(populations against temperature, energy ladder) and "
                             "conformers.png (the most populated conformers, distinguishing "
                             "torsions marked) into DIR (checked before any work; files "
                             "confpop did not write are never replaced)")
    parser.add_argument("--into-nonempty-folder", action="store_true",
                        help="allow an --out folder holding files confpop did not write (they "
                             "stay; a taken name gets -2)")
    parser.add_argument("--plot", default=None, metavar="FILE.png",
                        help="draw populations against temperature and the energy ladder "
                             "(checked before any work)")
    parser.add_argument("--report", default=None, metavar="FILE.html",
                        help="write one self-contained HTML report (job, cautions, table, "
                             "pictures, free energies; no network needed to open it)")
    _add_overwrite(parser, "--plot/--report")
    parser.add_argument("--json", action="store_true", help="print machine-readable JSON only")
    parser.add_argument("--quiet", action="store_true",
                        help="no progress bars (and no per-stage lines when stderr is a log)")


def _add_overwrite(parser, options: str) -> None:
    parser.add_argument("--overwrite", action="store_true",
                        help=f"let {options} replace an existing file that confpop did not "
                             "write (one it wrote is replaced anyway)")


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

    try:
        temps = check_temperatures(values, "--temperature")
    except InputError as exc:  # thermo counts from 0; the command line from 1
        import re
        raise InputError(re.sub(r"at position (\d+)",
                                lambda m: f"(value {int(m.group(1)) + 1} of -T/--temperature)",
                                str(exc))) from None
    low = [t for t in temps if t < 150.0]
    if low:
        print(f"{_PROG}: note: --temperature {low[0]:g} K is below 150 K; temperatures are in "
              f"kelvin ({low[0]:g} °C would be {low[0] + 273.15:g} K; write {low[0]:g}C for "
              f"degrees Celsius)", file=sys.stderr)
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
                        allow_long=args.allow_long_run, moves=not args.no_moves,
                        target_overlap=args.agreement or None, max_rounds=args.rounds,
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


#: the CLI table shows at most this many distinguishing torsions (all are in table.csv and
#: run.json); four fit an 120-column terminal beside three temperatures
_TABLE_TORSIONS = 4


def _ensemble_table_text(ens, temps, views=None, free: bool = False) -> str:
    """The conformer table: ΔE (and ΔG with --free-energy), degeneracy, populations per
    temperature, the torsions that distinguish the conformers, ring puckers that differ,
    hydrogen bonds and species; atoms numbered from 1."""
    from .describe import ID_CONVENTION, LABEL_CONVENTION, describe_conformers

    rel = ens.energies("kcal/mol")
    views = views or {"": ens.populations(temps)}
    desc = describe_conformers(ens)
    torsions = desc.torsions[:_TABLE_TORSIONS]
    rings = [c for c in desc.table.columns if c.startswith("ring_")
             and desc.table[c].nunique() > 1]
    hbonds = desc.table["hydrogen_bonds"] if (desc.table["hydrogen_bonds"] != "").any() else None
    gaps = {t: ens.energies("kcal/mol", energy="free", temperature=t) for t in temps} if free else {}
    labels = [(name, t) for t in temps for name in views]
    head = f"{'conf':>4}  {'ΔE kcal/mol':>11}  " + "".join(
        f"{'ΔG(' + format(t, 'g') + ' K)':>12}  " for t in gaps) + f"{'deg':>3}  " + "  ".join(
        f"{'p' + ('_' + name if name else '') + '(' + format(t, 'g') + ' K)':>12}" for name, t in labels)
    widths = [max(len(t.label) + 1, 6) for t in torsions]
    head += "".join(f"  {t.label + '°':>{w}}" for t, w in zip(torsions, widths))
    ring_widths = [max(len(c), 10, *desc.table[c].astype(str).str.len()) for c in rings]
    head += "".join(f"  {'ring ' + c[5:]:<{w}}" for c, w in zip(rings, ring_widths))
    table = ens.table()
    species = table["species"] if "species" in table.columns and table["species"].nunique() > 1 else None
    if species is not None:
        head += f"  {'species':>7}"
    if hbonds is not None:
        head += "  H-bonds"
    energies = "ΔE, ΔG in kcal/mol" if gaps else "ΔE in kcal/mol"
    lines = [f"conformers ({energies}; dihedrals in degrees; {LABEL_CONVENTION}; "
             f"{ID_CONVENTION})", head]
    for cid in ens.ids():
        line = f"{cid:>4}  {rel[cid]:>11.2f}  " + "".join(
            f"{gaps[t][cid]:>12.2f}  " for t in gaps) + f"{int(ens.degeneracy[cid]):>3}  " + "  ".join(
            f"{views[name].loc[cid, t]:>12.3f}" for name, t in labels)
        line += "".join(f"  {t.values[cid]:>{w}.0f}" for t, w in zip(torsions, widths))
        line += "".join(f"  {str(desc.table.loc[cid, c]):<{w}}" for c, w in zip(rings, ring_widths))
        if species is not None:
            line += f"  {int(species[cid]):>7}"
        if hbonds is not None:
            line += "  " + (hbonds[cid] or "-")
        lines.append(line)
    if any("*" in t.label for t in torsions):
        from .describe import STAR_NOTE
        lines.append(STAR_NOTE)
    if len(desc.torsions) > len(torsions):
        lines.append(f"{len(desc.torsions) - len(torsions)} more distinguishing torsion(s) in "
                     "table.csv and run.json (--out)")
    if not desc.torsions and len(ens) > 1:
        from .describe import DISTINGUISHING_DEGREES
        lines.append(f"no torsion differs by more than {DISTINGUISHING_DEGREES:g}° between "
                     "these conformers")
    lines.extend(desc.ring_summary())
    first = next(iter(views.values()))[temps[0]]
    for ring, shares in desc.pucker_shares(first).items():
        if len(shares) > 1:
            lines.append(f"ring {ring}, share of the population at {temps[0]:g} K: " + "; ".join(
                f"{name} {100 * share:.0f} %" for name, share in shares.items())
                + " (Cremer-Pople)")
    if any(" toward" in str(v) or " away from" in str(v) for c in rings for v in desc.table[c]) \
            or any(" toward" in line or " away from" in line for line in desc.ring_summary()):
        from .describe import SIDE_CONVENTION
        lines.append(f"rings: {SIDE_CONVENTION}")
    if hbonds is not None:
        shares = desc.hydrogen_bond_shares(first)
        lines.append(f"hydrogen bonds, share of the population at {temps[0]:g} K: " + "; ".join(
            f"{label} {100 * share:.0f} %" for label, share in shares.items())
            + f"; none {100 * (1 - first[desc.table['hydrogen_bonds'] != ''].sum()):.0f} %")
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
    # --plot/--report inside the --out folder (which this run creates) are checked once the
    # folder exists; any other place before any work
    inside_out = {name: _inside(getattr(args, name), args.out) for name in ("plot", "report")}
    if args.plot and not inside_out["plot"]:
        _check_plot_path(args.plot, args.overwrite)
    if args.report and not inside_out["report"]:
        _check_report_path(args.report, args.overwrite)
    _check_search_cost(args)
    progress = _progress_mode(args.quiet or args.json)
    folder = None
    if args.out:  # created, locked and proved writable before any work
        from .outdir import OutputFolder
        folder = OutputFolder(args.out, kind="ensemble", option="--out",
                              allow_nonempty=args.into_nonempty_folder)
    try:
        if args.plot and inside_out["plot"]:
            _check_plot_path(args.plot, args.overwrite)
        if args.report and inside_out["report"]:
            _check_report_path(args.report, args.overwrite)
        return _ensemble_work(args, temps, progress, folder)
    finally:
        if folder is not None:
            folder.close()


def _import_in_background(*modules: str) -> None:
    """Import modules in a daemon thread while the search runs: this process mostly waits
    for its workers then. The picture writers' matplotlib took 0.66 s to import of the
    1.8 s the two pictures took on a loaded machine (benchmarks/bench_pool.py measures
    the command with and without this)."""
    import importlib
    import threading

    def run():
        for name in modules:
            try:
                importlib.import_module(name)
            except Exception:  # the writer that needs it will say so
                return

    threading.Thread(target=run, name="confpop-imports", daemon=True).start()


def _inside(path, folder) -> bool:
    """Whether the file ``path`` would go straight into ``folder`` (both may not exist yet)."""
    if not path or not folder:
        return False
    from pathlib import Path

    parent = Path(path).expanduser().parent
    return parent.resolve() == Path(folder).expanduser().resolve()


def _progress_mode(quiet: bool):
    """Progress bars on a terminal; one line per stage when stderr is a log; or nothing."""
    if quiet:
        return False
    return True if sys.stderr.isatty() else "lines"


def _heartbeat(progress, text: str) -> None:
    if progress == "lines":  # "confpop: [12:04:31] ..." as the stage lines of execution.py
        import time
        print(f"{_PROG}: [{time.strftime('%H:%M:%S')}] {text}", file=sys.stderr, flush=True)


def _check_report_path(path, replace: bool = False) -> None:
    import os

    from .outdir import check_output_file

    check_output_file(path, "--report", replace=replace)
    if os.path.splitext(str(path))[1].lower() not in (".html", ".htm"):
        raise InputError(f"--report {str(path)!r}: the file name must end in .html")


def _ensemble_files(ens, temps, payload) -> dict:
    """{file name: write(path)} of one ensemble's output files."""
    from .writing import write_csv

    def run_json(path):
        with open(path, "w") as fh:
            json.dump(payload, fh, indent=2)
            fh.write("\n")
    files = {"ensemble.sdf": lambda path: ens.to_sdf(path),
             "table.csv": lambda path: write_csv(ens, path, temps), "run.json": run_json}
    if len(ens):
        from .plot import draw_conformers, ensemble_plot
        files["populations.png"] = lambda path: ensemble_plot(ens, temps, path=path)
        files["conformers.png"] = lambda path: draw_conformers(ens, path=path,
                                                               temperature=temps[0])
    return files


def _ensemble_settings(args) -> dict:
    """The command-line settings of a search, under their option names (for run.json)."""
    names = ("method", "solvent", "temperature", "seed", "trials", "rounds", "completeness",
             "min_population", "energy_window", "screen_margin", "screen_window",
             "no_minimum_check", "keep_mirror_images", "charge", "multiplicity",
             "enumerate_stereo", "keep_largest_fragment", "workers", "free_energy", "low_mode",
             "rescore", "allow_long_run")
    return {"--" + n.replace("_", "-"): getattr(args, n) for n in names if hasattr(args, n)}


def _ensemble_work(args, temps, progress, folder) -> int:
    import contextlib
    import os

    from .writing import ensemble_json
    from .pipeline import search, search_pool
    from .schema import solvent_model

    _check_solvent(args)
    sources = [args.input]
    if args.enumerate_stereo:
        from .molecule import stereoisomers
        sources = stereoisomers(args.input, charge=args.charge,
                                keep_largest_fragment=args.keep_largest_fragment)
    if args.store:  # a bad --store is one error line, before the first progress line
        from .store import ResultStore
        ResultStore(args.store).close()
    if folder is not None or args.plot:  # pictures to draw after the search
        _import_in_background("matplotlib.figure", "matplotlib.backends.backend_agg")
    results = []
    # one pool of workers for the searches, free energies and rescoring of this command (a
    # single search opens its own, once its input is checked)
    several = args.free_energy or args.rescore or args.enumerate_stereo
    with search_pool(args.method, None, args.workers) if several else contextlib.nullcontext():
        for source in sources:
            _heartbeat(progress, f"sampling conformers of {source}")
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
                                            progress=progress, store=args.store)
            if args.rescore:
                ens = ens.rescore(args.rescore, workers=args.workers, progress=progress, rank=False,
                                  store=args.store)
            results.append(ens)
    settings = _ensemble_settings(args)
    payloads = [ensemble_json(e, temps, input_text=args.input, settings=settings) for e in results]
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
    pictures = _ensemble_pictures(args, results, temps)
    if args.json:
        print(json.dumps(payloads[0] if len(payloads) == 1 else payloads, indent=2))
        return 0
    for ens in results:
        summary = next((p for p in ens.provenance if p.get("step") == "summary"), {})
        sample = next((p for p in ens.provenance if p.get("step") == "sample"), {})
        model = solvent_model(args.method, ens.solvent)
        print(f"{ens.name}  method {ens.level}  "
              + (f"solvent {ens.solvent} (implicit, {model.split('(')[0]})" if model else "gas phase"))
        if len(ens) == 0:
            for cid, row in ens.raw_table.iterrows():
                print(f"{cid:>4}  failed: {row['reason']}")
            print(f"{_PROG}: error: every conformer failed (reasons above)", file=sys.stderr)
            return 1
        views = (_population_views(ens, temps, args.free_energy, bool(args.rescore))
                 if (args.free_energy or args.rescore) else None)
        print(_ensemble_table_text(ens, temps, views, free=args.free_energy))
        if views:
            print("p_E: from electronic energies at " + ens.level + "; "
                  + ("p_G: from G(T) = E + harmonic free-energy correction (" + args.low_mode
                     + ", standard state " + ("1 M" if ens.solvent else "1 bar") + "); "
                     if args.free_energy else "")
                  + ("p_DFT: from B3LYP-D3(BJ)/def2-SVPD single points at the same geometries"
                     + ("; p_DFT+G: DFT energy + the free-energy correction" if args.free_energy else "")
                     if args.rescore else ""))
        n_eff = "; ".join(f"{ens.effective_count(t):.2f} at {t:g} K" for t in temps)
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
              f"conformers (Kish 1/Σp²): {n_eff}; {summary.get('seconds', 0):.1f} s")
        stages = [p for p in ens.provenance if p.get("step") not in ("input", "summary")]
        print("stages: " + ", ".join(f"{p['step']} {p['n_in']}->{p['n_out']} ({p['seconds']:.1f} s)"
                                     for p in stages))
    if written:
        print(f"wrote {', '.join(os.path.basename(w) for w in written)} to "
              f"{os.path.abspath(args.out)}")
    for path in pictures:
        print(f"wrote {path}")
    print(_ENSEMBLE_CAUTION)
    return 0


def _ensemble_pictures(args, results, temps) -> list:
    """--plot and --report for the first stereoisomer with conformers; the paths written."""
    written = []
    ens = next((e for e in results if len(e)), None)
    if ens is None:
        return written
    if args.plot:
        from .plot import ensemble_plot
        ensemble_plot(ens, temps, path=args.plot)
        written.append(args.plot)
    if args.report:
        from .report import write_report
        write_report(ens, args.report, temperatures=temps, input_text=args.input,
                     free_energy=args.free_energy, settings=_ensemble_settings(args),
                     cautions=[_ENSEMBLE_CAUTION])
        written.append(args.report)
    return written


# --------------------------------------------------------------------------- couplings

_COUPLINGS_CAUTION = (
    "Caution: Karplus equations reproduce measured vicinal couplings to about 0.5-1 Hz, and "
    "the populations behind these averages carry the energy method's error (see --energy-sigma)."
)


def _add_couplings(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("input", metavar="INPUT",
                        help="an ensemble SDF written by confpop, or a SMILES (then a conformer "
                             "search with default settings runs first)")
    parser.add_argument("--temperature", "-T", nargs="+", type=_temperature_arg, default=[298.15], action=_Once,
                        metavar="K", help="temperatures in kelvin (default 298.15); the fit uses the first")
    parser.add_argument("--observed", metavar="FILE.csv", default=None,
                        help="measured couplings, CSV columns atom_a, atom_b, J_hz [, sigma_hz] "
                             "(hydrogen atom numbers from 1, as printed and as in molecule "
                             "viewers); fits the populations")
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
    parser.add_argument("--solvent", default=None, help="implicit solvent for a SMILES input (GBSA with gfn2)")
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
    _add_overwrite(parser, "--plot")
    parser.add_argument("--out", default=None, metavar="DIR",
                        help="write couplings.csv, couplings.json (and fit.csv with --observed) "
                             "into DIR (checked before any work; files confpop did not write "
                             "are never replaced)")
    parser.add_argument("--into-nonempty-folder", action="store_true",
                        help="allow an --out folder holding files confpop did not write")
    parser.add_argument("--json", action="store_true", help="print machine-readable JSON only")


def _fit_warning_text(text: str) -> str:
    """``FitResult.warning`` in command-line terms: atoms numbered from 1, options instead of
    Python names."""
    from .describe import one_based_labels

    text = one_based_labels(text)
    text = text.replace("(see minimal_subset)",
                        "(see the smallest conformer set explaining the data, above)")
    text = text.replace("pass species= to fit", "give --species N to fit")
    return _cli_terms(text)


def _renumber(frame):
    """A copy of a couplings table with atoms numbered from 1 (labels, indices, tuples)."""
    from .describe import one_based_labels

    if frame is None:
        return None
    out = frame.copy()
    for col in ("label", "group", "torsion"):
        if col in out.columns:
            out[col] = out[col].map(one_based_labels)
    for col in ("atom_a", "atom_b"):
        if col in out.columns:
            out[col] = out[col].map(lambda v: int(v) + 1)
    for col in ("atoms_a", "atoms_b"):
        if col in out.columns:
            out[col] = out[col].map(lambda v: tuple(int(x) + 1 for x in v))
    return out


def _observed_from_one(frame, path):
    """--observed atom numbers (from 1) to 0-based indices, each checked."""
    frame = frame.copy()
    for col in ("atom_a", "atom_b"):
        if col not in frame.columns:
            continue
        for k, v in enumerate(frame[col], start=1):
            try:
                ok = float(v) == int(float(v)) and int(float(v)) >= 1
            except (TypeError, ValueError):
                ok = False
            if not ok:
                raise InputError(f"--observed {str(path)!r} row {k}: {col} must be a hydrogen "
                                 f"atom number from 1 (as printed), got {v!r}")
        frame[col] = frame[col].map(lambda v: int(float(v)) - 1)
    return frame


def _plain(value):
    """A JSON-ready Python value from a table cell (tuples of indices, numpy scalars)."""
    if isinstance(value, tuple):
        return [_plain(v) for v in value]
    if hasattr(value, "item"):
        value = value.item()
    if isinstance(value, float):
        return _json_number(value)
    return value


def _check_plot_path(path, replace: bool = False) -> None:
    """--plot: a writable place and a format matplotlib knows, checked before any work."""
    import os

    from .outdir import check_output_file

    check_output_file(path, "--plot", replace=replace)
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
    temps = _temperatures(args.temperature)
    if args.plot:
        _check_plot_path(args.plot, args.overwrite)
    observed = None
    if args.observed:  # read before any work: a bad file fails at once
        observed = _observed_from_one(_read_observed(args.observed), args.observed)
    folder = _open_folder(args, "couplings")
    try:
        return _couplings_work(args, temps, observed, folder)
    finally:
        if folder is not None:
            folder.close()


def _couplings_work(args, temps, observed, folder) -> int:
    from . import nmr
    from .describe import LABEL_CONVENTION
    from .schema import solvent_model

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
        try:
            fit = nmr.fit_populations(ens, observed, temperature=temps[0],
                                      parameters=args.parameters, seed=args.seed,
                                      species=args.species)
        except InputError as exc:  # the library numbers atoms from 0, the command line from 1
            import re

            from .describe import one_based_labels
            text = re.sub(r"observed coupling (\d+)-(\d+)",
                          lambda m: f"--observed pair {int(m.group(1)) + 1}-{int(m.group(2)) + 1}",
                          one_based_labels(str(exc)))
            text = text.replace("see confpop.nmr.vicinal_pairs(mol)",
                                "the pairs that have one are listed by --by pair (hydrogen "
                                "numbers from 1, as printed)")
            raise InputError(text) from None
    first = next((p for p in ens.provenance if p.get("step") == "input"), {})
    model = solvent_model(first.get("method", ens.level), ens.solvent)
    title = (f"{ens.name or args.input}  ({ens.level}, {model or 'gas phase'}; "
             f"Karplus {args.parameters})")
    table = _renumber(table)
    spread = _renumber(spread)
    residuals = _renumber(fit.residuals) if fit is not None else None
    families = _renumber(fit.families) if fit is not None and fit.families is not None else None
    if args.plot:
        from . import plot
        if fit is not None:
            plot.coupling_parity_plot(residuals, path=args.plot, title=title)
        else:
            plot.coupling_temperature_plot(table, path=args.plot, title=title,
                                           spread=spread)

    rows = []
    for _, row in table.iterrows():
        item = {c: _plain(row[c]) for c in id_cols}
        item["J_hz"] = {format(t, "g"): _json_number(row[t]) for t in temps}
        rows.append(item)
    payload = {"temperatures_K": temps, "parameters": args.parameters, "by": args.by,
               "atom_numbering": LABEL_CONVENTION, "method": ens.level,
               "solvent_model": model,
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
            "rms_deviation_hz": _json_number(fit.rms_deviation),
            "warning": _fit_warning_text(fit.warning),
            "minimal_subset": list(fit.minimal_subset) if fit.minimal_subset else None,
            "free_energy_unit": fit.unit,
            "conformers": [{"conformer": int(cid), **{k: _json_number(v) for k, v in r.items()}}
                           for cid, r in frame.iterrows()],
            "residuals": [{k: _plain(v) for k, v in r.items()}
                          for _, r in residuals.iterrows()],
            "families": [{k: _plain(v) for k, v in r.items()}
                         for _, r in families.iterrows()] if families is not None else [],
        }
    written = []
    if folder is not None:
        def couplings_csv(path):
            frame = table.rename(columns={t: f"J_{t:g}K_hz" for t in temps})
            frame.to_csv(path, index=False)

        def couplings_json(path):
            with open(path, "w") as fh:
                json.dump(payload, fh, indent=2, ensure_ascii=False, default=str)
                fh.write("\n")
        files = {"couplings.csv": couplings_csv, "couplings.json": couplings_json}
        if fit is not None:
            files["fit.csv"] = lambda path: residuals.to_csv(path, index=False)
        for name, write in files.items():
            name = folder.claim(name, key=f"file:{name}")
            written.append(str(folder.write_file(name, write)))
    if args.json:
        print(json.dumps(payload, indent=2, ensure_ascii=False, default=str))
        return 0

    key = "group" if args.by == "group" else "label"
    width = max(len(key), *(len(str(v)) for v in table[key])) if len(table) else len(key)
    lines = [f"{len(ens)} conformers ({ens.level}, {model or 'gas phase'}); population-averaged "
             f"vicinal 3J(H,H) in Hz; {LABEL_CONVENTION}",
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
        from .describe import ID_CONVENTION
        lines.append(f"populations per conformer ({ID_CONVENTION})")
        lines.append(f"{'conf':>4}  {'fitted':>7}  {'± std':>6}  {'Boltzmann':>9}  "
                     f"{'implied dG ' + fit.unit:>20}")
        for cid, r in fit.to_frame().iterrows():
            dg = "inf" if not math.isfinite(r["free_energy"]) else f"{r['free_energy']:.2f}"
            lines.append(f"{cid:>4}  {r['population']:>7.3f}  {r['population_std']:>6.3f}  "
                         f"{r['boltzmann']:>9.3f}  {dg:>20}")
        lines.append(f"{'observed':>24}  {'obs':>6}  {'fit':>6}  {'Boltz':>6}")
        for _, r in residuals.iterrows():
            lines.append(f"{r['kind'] + ' ' + str(r['atom_a']) + '-' + str(r['atom_b']):>24}  "
                         f"{r['observed']:>6.2f}  {r['predicted']:>6.2f}  {r['boltzmann']:>6.2f}")
        if fit.minimal_subset:
            lines.append(f"smallest conformer set explaining the data within the noise: "
                         f"{list(fit.minimal_subset)} (chi2 {fit.minimal_subset_chi2:.2f})")
        fixed = families[families["determined"]] if families is not None else []
        if len(fixed):
            lines.append("rotamer families the data determine (population ± bootstrap std; "
                         "g+ 0..120, g- -120..0, t beyond ±120 degrees):")
            for r in fixed.itertuples():
                lines.append(f"{r.torsion:>24}  {r.family:<3} {r.population:6.3f} ± "
                             f"{r.population_std:5.3f}  (Boltzmann {r.boltzmann:.3f})")
        if fit.warning:
            lines.append("warning: " + _fit_warning_text(fit.warning))
    if args.plot:
        lines.append(f"wrote {args.plot}")
    if written:
        import os
        lines.append(f"wrote {', '.join(os.path.basename(w) for w in written)} to "
                     f"{os.path.abspath(args.out)}")
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
                        help="implicit solvent, e.g. water, chloroform: GBSA with gfn2/gfn1/gfnff (xtb-python), ALPB with tblite-gfn2/tblite-gfn1; force fields have none")
    parser.add_argument("--temperature", "-T", nargs="+", type=_temperature_arg, default=[298.15], action=_Once,
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
    _check_solvent(args)
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
                       help="the dihedral I-J-K-L to scan; atoms numbered from 1 as in molecule "
                            "viewers and the SDF atom block (hydrogens included; for SMILES "
                            "input they follow the heavy atoms)")
    which.add_argument("--bond", nargs=2, type=int, metavar=("J", "K"),
                       help="the bond J-K to turn (atoms numbered from 1); I and L are chosen, "
                            "heavy atoms preferred")
    parser.add_argument("--method", default="gfn2",
                        help="energy method: gfn2 (default), gfn1, gfnff, tblite-gfn2, mmff94s, "
                             "mmff94, uff, model")
    parser.add_argument("--solvent", default=None,
                        help="implicit solvent, e.g. water, chloroform: GBSA with gfn2/gfn1/gfnff (xtb-python), ALPB with tblite-gfn2/tblite-gfn1; force fields have none")
    parser.add_argument("--step", type=_finite_float, default=15.0, metavar="DEG",
                        help="grid step in degrees; must divide 360 (default 15)")
    parser.add_argument("--rigid", action="store_true",
                        help="rigid scan: turn one fragment, optimize nothing (fast; barriers too high)")
    parser.add_argument("--convergence", default="tight",
                        choices=["loose", "normal", "tight", "verytight"],
                        help="optimizer convergence at each point (default tight)")
    parser.add_argument("--temperature", "-T", nargs="+", type=_temperature_arg, default=[298.15], action=_Once,
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
    parser.add_argument("--store", default=None, metavar="FILE",
                        help="SQLite result store: reuse finished walks, resume an interrupted scan")
    parser.add_argument("--plot", default=None, metavar="FILE.png",
                        help="draw the profile (minima, maxima, barriers) to this file")
    _add_overwrite(parser, "--plot")
    parser.add_argument("--out", default=None, metavar="DIR",
                        help="write profile.csv (every scan point), scan.json and profile.png "
                             "into DIR (checked before any work; files confpop did not write "
                             "are never replaced)")
    parser.add_argument("--into-nonempty-folder", action="store_true",
                        help="allow an --out folder holding files confpop did not write")
    parser.add_argument("--json", action="store_true", help="print machine-readable JSON only")


def _one_based_atoms(mol, values, option: str) -> list:
    """Command-line atom numbers (from 1) to RDKit indices, with errors in the user's terms."""
    n = mol.GetNumAtoms()
    bad = [v for v in values if not 1 <= v <= n]
    if bad:
        raise InputError(f"{option}: atom {bad[0]} does not exist; atoms are numbered from 1 "
                         f"to {n} (hydrogens included, as in the SDF atom block)")
    return [int(v) - 1 for v in values]


def _open_folder(args, kind: str):
    if not getattr(args, "out", None):
        return None
    from .outdir import OutputFolder
    return OutputFolder(args.out, kind=kind, option="--out",
                        allow_nonempty=args.into_nonempty_folder)


def _angle_text(value: float) -> str:
    """Degrees to one decimal, without a "-0.0"."""
    value = round(float(value), 1)
    return f"{value + 0.0:.1f}"


def _run_scan(args: argparse.Namespace) -> int:
    from .execution import default_workers
    from .units import normalize_unit

    unit = normalize_unit(args.unit)
    temps = _temperatures(args.temperature)
    if args.delta_nu <= 0.0:
        raise InputError(f"--delta-nu must be > 0 Hz, got {args.delta_nu:g}")
    if args.plot:
        _check_plot_path(args.plot, args.overwrite)
    if not 1.0 <= args.step <= 180.0:  # 0.001 deg asked for 360000 optimizations (960 MB)
        raise InputError(f"--step must be between 1 and 180 degrees, got {args.step:g}")
    workers = _cap_workers(args.workers)
    if workers is None:
        workers = 2 if default_workers() >= 2 else 1
    if isinstance(workers, bool) or workers < 1:
        raise InputError(f"--workers must be >= 1, got {workers}")
    folder = _open_folder(args, "scan")
    try:
        return _scan_work(args, temps, unit, workers, folder)
    finally:
        if folder is not None:
            folder.close()


def _scan_work(args, temps, unit, workers, folder) -> int:
    import contextlib
    import time

    from . import kinetics
    from .describe import LABEL_CONVENTION, atom_label
    from .execution import pool_scope
    from .molecule import load_molecule
    from .pipeline import FORCE_FIELDS, search_pool
    from .describe import one_based_labels
    from .schema import solvent_model
    from .torsion import _check_dihedral_atoms, scan_torsion, torsion_for_bond

    import re

    _check_solvent(args)
    mol = load_molecule(args.input, charge=args.charge, multiplicity=args.multiplicity)
    # the checks in the user's numbering come first, outside the renumbering below (a message
    # already in 1-based labels must not be renumbered again)
    option = "--bond" if args.bond is not None else "--torsion"
    given = args.bond if args.bond is not None else args.torsion
    chosen = _one_based_atoms(mol, given, option)
    for a, b in zip(chosen, chosen[1:]):
        if mol.GetBondBetweenAtoms(a, b) is None:
            raise InputError(
                f"{option} {' '.join(map(str, given))}: {atom_label(mol, a)} and "
                f"{atom_label(mol, b)} are not bonded; give "
                + ("two bonded atoms" if option == "--bond" else
                   "four atoms in a bonded chain I-J-K-L") + f" ({LABEL_CONVENTION})")
    try:
        if args.bond is not None:
            atoms = torsion_for_bond(mol, *chosen).atoms
        else:
            atoms = _check_dihedral_atoms(mol, chosen)
    except InputError as exc:  # torsion.py names atoms from 0
        raise InputError(one_based_labels(str(exc))) from None
    labels = [atom_label(mol, a) for a in atoms]
    label = "-".join(labels)
    model = solvent_model(args.method, args.solvent)

    progress = _progress_mode(args.json)
    _heartbeat(progress, f"scanning {label} ({'rigid' if args.rigid else 'relaxed'}, "
                         f"step {args.step:g} deg)")
    started = time.perf_counter()
    # the up and down walks on one pool of preloaded workers, replaced if one dies
    scope = contextlib.nullcontext()
    if workers > 1 and not args.rigid:  # a force-field scan gets a pool without preloading
        scope = (pool_scope(workers) if str(args.method).lower() in FORCE_FIELDS
                 else search_pool(args.method, None, workers))
    try:
        with scope:
            profile = scan_torsion(mol, atoms, method=args.method, solvent=args.solvent,
                                   step=args.step, relaxed=not args.rigid,
                                   convergence=args.convergence, unit=unit,
                                   charge=args.charge, multiplicity=args.multiplicity,
                                   store=args.store)
    except InputError as exc:
        text = one_based_labels(str(exc))
        for pattern, replacement in _SCAN_TERMS:
            text = re.sub(pattern, replacement, text)
        raise InputError(text) from None
    seconds = time.perf_counter() - started
    _heartbeat(progress, f"scan done in {seconds:.1f} s")
    title = (f"{label} of {args.input if len(args.input) <= 40 else args.input[:37] + '...'}  "
             f"({'relaxed' if not args.rigid else 'rigid'}, {args.method.lower()}, "
             f"{model or 'gas phase'})")
    from .plot import plot_torsion_profile
    if args.plot:
        plot_torsion_profile(profile, path=args.plot, title=title)

    rates = profile.rates(temps, delta_nu_hz=args.delta_nu)
    payload = profile.to_dict(temps, delta_nu_hz=args.delta_nu)
    payload.update({"input": args.input, "atoms": [a + 1 for a in atoms], "label": label,
                    "atom_labels": labels, "index_base": 1, "atom_numbering": LABEL_CONVENTION,
                    "solvent_model": model, "delta_nu_hz": args.delta_nu, "temperatures": temps,
                    "seconds": seconds, "plot": args.plot,
                    "atropisomer_class_37C": profile.atropisomer_class(),
                    "caution": _SCAN_CAUTION})
    written = []
    if folder is not None:
        import pandas as pd

        def profile_csv(path):
            pd.DataFrame({"angle_deg": profile.angles,
                          f"energy_rel_{unit.replace('/', '_')}": profile.energies,
                          "converged": profile.converged,
                          "added_at_extremum": getattr(profile, "refined", False)}).to_csv(path, index=False)

        def scan_json(path):
            with open(path, "w") as fh:
                json.dump(payload, fh, indent=2, ensure_ascii=False, default=_json_number)
                fh.write("\n")
        files = {"profile.csv": profile_csv, "scan.json": scan_json,
                 "profile.png": lambda path: plot_torsion_profile(profile, path=path, title=title)}
        for name, write in files.items():
            name = folder.claim(name, key=f"file:{name}")
            written.append(str(folder.write_file(name, write)))
    if args.json:
        print(json.dumps(payload, indent=2, ensure_ascii=False, default=_json_number))
        return 0

    kind = "rigid" if args.rigid else f"relaxed ({args.convergence})"
    n_extra = int(profile.refined.sum())
    lines = [
        f"Torsion {label}  ({LABEL_CONVENTION}; bond {labels[1]}-{labels[2]} turns)",
        f"{kind} scan, {args.method.lower()}, {model or 'gas phase'}, "
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
    if written:
        import os
        lines.append(f"wrote {', '.join(os.path.basename(w) for w in written)} to "
                     f"{os.path.abspath(args.out)}")
    lines.append(_SCAN_CAUTION)
    print("\n".join(lines))
    return 0


# --------------------------------------------------------------------------- shifts
# (self-contained block: chemical shifts and stereoisomer assignment, confpop.nmr.shifts/assign)

_SHIFTS_CAUTION = (
    "caution: computed shifts carry the method's error (scaled GIAO, measured on rigid "
    "molecules: see the README, 'Chemical shifts'); DP4 probabilities rank candidates and "
    "show how decisive the data are, they do not replace experiment or a spectroscopist's "
    "judgement.")


def _add_shifts(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("inputs", metavar="INPUT", nargs="+",
                        help="one or more candidates: SMILES, or ensemble SDF files written by "
                             "confpop; atom numbers in --measured follow the first candidate")
    parser.add_argument("--measured", metavar="FILE.csv", nargs="+", default=None, action=_Once,
                        help="measured shifts, CSV columns nucleus (13C or 1H; default 13C), "
                             "atom (1-based, as in the labels printed), shift_ppm; one file per "
                             "candidate also gives the pairing of spectra with candidates")
    parser.add_argument("--enumerate-stereo", action="store_true",
                        help="take every stereoisomer of one input (unassigned centres and "
                             "double bonds) as the candidates")
    parser.add_argument("--temperature", "-T", nargs="+", type=_finite_float, default=[298.15],
                        action=_Once, metavar="K",
                        help="temperatures in kelvin (default 298.15); the comparison uses the first")
    parser.add_argument("--nuclei", nargs="+", default=["1H", "13C"], choices=["1H", "13C"],
                        help="nuclei to predict (default 1H 13C)")
    parser.add_argument("--functional", default=None,
                        help="DFT functional of the shieldings (default pbe0, measured)")
    parser.add_argument("--basis", default=None,
                        help="basis set of the shieldings (default def2-svp, measured)")
    parser.add_argument("--reference", default="auto", choices=["auto", "scaling", "tms"],
                        help="shielding -> shift: our fitted linear scaling, TMS at the same level, "
                             "or auto (scaling where fitted, default)")
    parser.add_argument("--scaling", default="auto", choices=["auto", "candidate", "fixed"],
                        help="DP4 scaling: per-candidate regression (>= 5 signals with auto) or "
                             "our fixed scaling")
    parser.add_argument("--method", default="gfn2", help="conformer search method (default gfn2)")
    parser.add_argument("--solvent", default=None,
                        help="implicit solvent of the conformer search (shieldings are gas phase)")
    parser.add_argument("--seed", type=int, default=0, help="sampling seed (default 0)")
    parser.add_argument("--workers", type=int, default=None,
                        help="worker processes (default: all cores; 1 = serial)")
    parser.add_argument("--store", default=None, metavar="FILE",
                        help="SQLite result store: reuse finished calculations, resume interrupted runs")
    parser.add_argument("--json", action="store_true", help="print machine-readable JSON only")


def _shift_sources(args) -> list:
    """The candidate inputs (with --enumerate-stereo: the stereoisomers' SMILES); cheap."""
    from .molecule import stereoisomers

    sources = list(args.inputs)
    if args.enumerate_stereo:
        if len(sources) != 1:
            raise InputError("--enumerate-stereo takes one INPUT (its stereoisomers are the "
                             f"candidates), got {len(sources)}")
        sources = [m.GetProp("_Name") for m in stereoisomers(sources[0])]
        if len(sources) < 2:
            raise InputError(f"--enumerate-stereo: {args.inputs[0]!r} has no unassigned "
                             "stereocentre or double bond, so there is only one candidate")
    return sources


def _shift_candidates(args, sources):
    """[(name, Ensemble)] for the inputs; a SMILES gets a conformer search."""
    from pathlib import Path

    from .pipeline import search

    out = []
    for src in sources:
        if Path(src).is_file():
            from .io import read_ensemble
            ens = read_ensemble(src)
        else:
            ens = search(src, method=args.method, solvent=args.solvent, seed=args.seed,
                         workers=_cap_workers(args.workers), store=args.store, progress=False)
        out.append((src, ens))
    return out


def _shift_rows_to_reference(table, mol_ref, mol):
    """Predicted rows of ``mol`` in the atom numbering of ``mol_ref`` (same constitution)."""
    match = mol.GetSubstructMatch(mol_ref, useChirality=False)
    if len(match) != mol_ref.GetNumAtoms():
        raise InputError("the candidates must have the same atoms and bonds (stereoisomers); "
                         "atom numbers in --measured follow the first candidate")
    back = {j: i for i, j in enumerate(match)}
    table = table.copy()
    table["atoms"] = [tuple(sorted(back[a] for a in g)) for g in table["atoms"]]
    table["atom_index"] = [g[0] for g in table["atoms"]]
    return table


def _spectrum_name(path) -> str:
    from pathlib import Path
    return Path(str(path)).name


def _shift_comparison_lines(name, comp, temp) -> list:
    lines = [f"  {name}: measured vs predicted at {temp:.2f} K (error = predicted - measured):"]
    for row in comp.itertuples(index=False):
        flag = "  OUTLIER" if row.outlier else ""
        lines.append(f"    {row.nucleus:>4} atom {row.atom:<4} {row.label:<24} "
                     f"{row.measured_ppm:8.2f} {row.predicted_ppm:8.2f} {row.error_ppm:+8.2f}{flag}")
    lines.append("    MAE: " + ", ".join(f"{k} {v:.2f} ppm" for k, v in comp.attrs["mae"].items())
                 + " (expected after scaling: "
                 + ", ".join(f"{k} {v:.2f}" for k, v in comp.attrs["expected_error"].items()
                             if k in comp.attrs["mae"]) + " ppm)")
    return lines


def _run_shifts(args: argparse.Namespace) -> int:
    import pandas as pd

    from .nmr.assign import assignment_probabilities, pairing_probabilities
    from .nmr.shifts import chemical_shifts, compare_shifts, read_measured_shifts

    temps = _temperatures(args.temperature)
    spectra = list(args.measured or [])
    for path in spectra:  # read before any work: a bad file fails at once
        try:
            read_measured_shifts(path)
        except InputError as exc:
            raise InputError(f"--measured: {exc}") from None
    names = [_spectrum_name(p) for p in spectra]
    if len(set(names)) != len(names):
        raise InputError("--measured: give files with different names (they label the spectra)")
    sources = _shift_sources(args)
    if len(spectra) > 1 and len(spectra) != len(sources):
        raise InputError(f"--measured: {len(spectra)} files for {len(sources)} candidates; "
                         "give one file, or one per candidate to pair spectra with candidates")
    workers = _cap_workers(args.workers)
    candidates = _shift_candidates(args, sources)
    ref_mol = candidates[0][1].mol
    payload = {"temperatures": temps, "candidates": []}
    comparisons = {}  # (candidate, spectrum) -> comparison
    lines = []
    for name, ens in candidates:
        table = chemical_shifts(ens, temps, nuclei=tuple(args.nuclei), functional=args.functional,
                                basis=args.basis, reference=args.reference, workers=workers,
                                store=args.store)
        level = table.attrs["level"]
        if ens is not candidates[0][1]:
            table = _shift_rows_to_reference(table, ref_mol, ens.mol)
        entry = {"input": name, "conformers": len(ens.ids()),
                 "level": f"{level['functional']}/{level['basis']} GIAO on {ens.level} geometries",
                 "reference": table.attrs["reference"],
                 "shifts": [{"label": r["label"], "nucleus": r["nucleus"],
                             "atoms": [a + 1 for a in r["atoms"]], "species": int(r["species"]),
                             **{f"{t:.2f}": _json_number(r[t]) for t in temps}}
                            for _, r in table.iterrows()]}
        lines.append(f"candidate {name}: {len(ens.ids())} conformer(s), {entry['level']}, "
                     f"reference {entry['reference']}")
        lines.append(f"  {'signal':<28}{'nucleus':>8}" + "".join(f"{t:>10.2f}K" for t in temps))
        several = table["species"].nunique() > 1
        for r in entry["shifts"]:
            sp = f" [species {r['species']}]" if several else ""
            lines.append(f"  {r['label'] + sp:<28}{r['nucleus']:>8}"
                         + "".join(f"{r[f'{t:.2f}']:>11.2f}" for t in temps))
        entry["comparisons"] = {}
        for path, spectrum in zip(spectra, names):
            comp = compare_shifts(table, path, temperature=temps[0], mol=ref_mol)
            comparisons[(name, spectrum)] = comp
            entry["comparisons"][spectrum] = {
                "rows": [{k: _plain(v) for k, v in row.items()} for row in comp.to_dict("records")],
                "mae_ppm": {k: _json_number(v) for k, v in comp.attrs["mae"].items()}}
            lines.extend(_shift_comparison_lines(spectrum, comp, temps[0]))
        payload["candidates"].append(entry)
    if len(candidates) >= 2 and spectra:
        payload["assignment"] = {"method": "DP4 (Smith & Goodman, J. Am. Chem. Soc. 2010, 132, "
                                           "12946)", "spectra": {}}
        for spectrum in names:
            probs, contrib = assignment_probabilities(
                {c: comparisons[(c, spectrum)] for c, _ in candidates}, scaling=args.scaling)
            payload["assignment"]["spectra"][spectrum] = {
                "probabilities": {c: {k: _json_number(float(v)) for k, v in row.items()}
                                  for c, row in probs.iterrows()},
                "contributions": [{k: _plain(v) for k, v in row.items()}
                                  for row in contrib.to_dict("records")]}
            lines.append(f"assignment of {spectrum} (DP4 probabilities, Smith & Goodman 2010):")
            lines.append(f"  {'candidate':<30}{'P(13C)':>9}{'P(1H)':>9}{'P(all)':>9}")
            for c, row in probs.iterrows():
                cells = "".join(f"{'-' if pd.isna(row[k]) else format(row[k], '.3f'):>9}"
                                for k in ("P_13C", "P_1H", "P_all"))
                lines.append(f"  {c:<30}{cells}")
            lines.append("  per-signal terms ln S(|e|/sigma) (more negative = speaks against):")
            for row in contrib.itertuples(index=False):
                lines.append(f"    {row.candidate:<24} {row.nucleus:>4} atom {row.atom:<4} "
                             f"scaled {row.scaled_ppm:8.2f} error {row.error_ppm:+7.2f} "
                             f"term {row.log_term:7.2f} ({row.scaling})")
        if len(spectra) > 1:
            pairing = pairing_probabilities(comparisons, scaling=args.scaling)
            payload["assignment"]["pairing"] = [
                {"pairing": list(r.pairing), "probability": _json_number(float(r.probability))}
                for r in pairing.itertuples(index=False)]
            lines.append("pairing of spectra with candidates (DP4 over all spectra at once):")
            for r in pairing.itertuples(index=False):
                lines.append(f"  {r.probability:7.3f}  " + ";  ".join(r.pairing))
    elif len(candidates) >= 2:
        lines.append("note: give --measured to compare the candidates and assign")
    lines.append(_SHIFTS_CAUTION)
    payload["caution"] = _SHIFTS_CAUTION
    if args.json:
        print(json.dumps(payload, indent=1))
    else:
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
    ("shifts", _add_shifts, _run_shifts,
     "population-averaged 1H/13C shifts (GIAO DFT); with --measured, errors and the "
     "DP4 assignment of candidate stereoisomers"),
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


#: messages from the library name Python arguments; on the command line they name options
_CLI_TERMS = (
    (r"pass keep_largest_fragment=True \(command line (--[\w-]+)\)", r"give \1"),
    (r"with confpop\.stereoisomers\(\) \(command line (--[\w-]+)\)", r"with \1"),
    (r", or pass stereo='ignore' to let conformer generation pick a configuration at random "
     r"\(the ensemble then mixes stereoisomers\)", ""),
    (r"fix the geometry or pass stereo='ignore'",
     "fix the geometry (or draw the molecule with assigned configurations)"),
    (r"pass stereo='ignore' \(and check the conformers' axis yourself\) or leave out the "
     r"cumulene", "leave out the cumulene"),
    (r"(?:try|use) method[= ]?'(\w+)'", r"try --method \1"),
    (r"\(energy_property= and unit=; (--energy-property and --energy-unit) on the command "
     r"line\)", r"(\1)"),
    (r"\(unit=; (--energy-unit)(?: on the command line)?\)", r"(\1)"),
    (r"\(uniform_weights=True; (--uniform-weights)\)", r"(\1)"),
    (r"uniform_weights=True", "--uniform-weights"),
    (r"\(charge=\.\.\., command line (--charge)\)", r"(\1)"),
    (r"\bcharge=([+-]?\d+)", r"--charge \1"),
    (r"got solvent='([^']*)'", r"got --solvent \1"),
)

#: scan messages from confpop.torsion_scan (Python arguments -> the scan command's options)
_SCAN_TERMS = (
    (r"\bgot step=", "got --step "),
    (r"^step must", "--step must"),
    (r"\bstep=", "--step "),
)


def _check_solvent(args) -> None:
    """--solvent with a --method that has no implicit solvent model: one error line before
    any work (the library would find out only once sampling had started)."""
    solvent = getattr(args, "solvent", None)
    method = getattr(args, "method", None)
    if solvent is None or not isinstance(method, str):
        return
    from .backends import available_backends, backend_class
    if method.lower() not in available_backends():
        return  # the unknown method gets its own message where it is used
    try:
        capabilities = backend_class(method.lower()).capabilities
    except ConfpopError:
        return  # a missing engine is reported where the method is used
    if "solvent" not in capabilities:
        raise InputError(f"--method {method} has no implicit solvent model; got --solvent "
                         f"{solvent} (leave out --solvent, or choose a method with one, e.g. "
                         "gfn2)")


def _cli_terms(message: str) -> str:
    """A library message in command-line terms (option names instead of Python arguments)."""
    import re

    for pattern, replacement in _CLI_TERMS:
        message = re.sub(pattern, replacement, message)
    return message


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
    from .errors import ConfpopWarning, LoggedWarning

    if issubclass(category, LoggedWarning):
        return  # also logged: the log line is the one the user sees
    if issubclass(category, ConfpopWarning):
        print(f"{_PROG}: warning: {' '.join(str(message).split())}", file=sys.stderr)
    else:
        _default_show_warning(message, category, filename, lineno, file, line)


#: library modules whose log lines name atoms from 0 (renumbered from 1 on the command line)
_ZERO_BASED_LOGGERS = ("confpop.torsion", "confpop.torsion_scan", "confpop.torsion_profile",
                       "confpop.interconversion")


class _CautionHandler(__import__("logging").Handler):
    """The library's log warnings on stderr as ``confpop: warning: ...``, one line each, atoms
    numbered from 1 and Python argument names in command-line terms."""

    def __init__(self):
        import logging
        super().__init__(level=logging.WARNING)

    def emit(self, record):
        try:
            text = " ".join(record.getMessage().split())
            if record.name in _ZERO_BASED_LOGGERS:
                from .describe import one_based_labels
                text = one_based_labels(text)
            print(f"{_PROG}: warning: {_cli_terms(text)}", file=sys.stderr)
        except Exception:  # a log line must never end a run
            self.handleError(record)


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

    import logging

    previous = _install_signal_handlers()
    library_log = logging.getLogger("confpop")
    caution_handler = _CautionHandler()
    library_log.addHandler(caution_handler)
    try:
        with warnings.catch_warnings():
            warnings.showwarning = _show_warning
            return _main(argv)
    finally:
        library_log.removeHandler(caution_handler)
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
        message = _cli_terms(" ".join(str(err).split()) or type(err).__name__)
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


if __name__ == "__main__":  # `python -m confpop.cli` runs the command too (it printed nothing before)
    sys.exit(main())
