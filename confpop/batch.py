"""Conformer searches of many molecules: one call, one summary table, one folder per molecule.

:func:`search_many` runs :func:`confpop.search` on every molecule of a list (SMILES, RDKit
molecules, MOL/SDF/XYZ paths) and collects the ensembles, a summary table and a failure
list. One molecule that cannot be read or searched never stops the others: its error type
and message go to the failure list. :func:`read_batch_input` reads the list from a
``.smi``, ``.csv``/``.tsv`` or ``.sdf`` file.

How the work is spread
----------------------
``parallel="molecules"``
    Each molecule is one unit of work (:func:`confpop.execution.run_units`): the local
    process pool or the executor runs whole molecules side by side, and each molecule's
    search runs serially inside its worker (``search(..., workers=1)``). Nothing waits at the
    end of a stage for the slowest conformer of one molecule, and sampling, pruning and
    checks (serial within a search) run in parallel too. For 20 small molecules on 2
    workers (``benchmarks/bench_scaling.py``) it was the faster of the two ways.
``parallel="conformers"``
    The molecules run one after the other in the calling process, each search spreading
    its conformers over the workers or the executor (one local pool is kept for the whole
    batch: a new pool per stage would import the engines again in every worker). Better for
    a few large molecules: a batch of 3 molecules on 16 workers would otherwise leave 13
    idle.
``parallel="auto"`` (default)
    "molecules" when there are at least as many molecules as worker slots (local workers,
    the ``max_workers`` of a pool, or the threads of a dask cluster), else "conformers".

Files (``out_dir``)
-------------------
One folder per molecule whose search returned an ensemble (``ensemble.sdf``, ``table.csv``,
``run.json``, as the ``ensemble`` command writes them) and, at the top, ``summary.csv`` and
``failures.csv``. Each molecule's folder is written as soon as that molecule finishes (in a
hidden temporary folder renamed when complete) and the two tables are rewritten (under a
temporary name, then renamed) after every molecule, so an interrupted batch keeps
everything that finished.

The folder is a :class:`confpop.outdir.OutputFolder`: a manifest records what confpop wrote,
and nothing else is ever replaced or deleted (a molecule whose folder name is taken by
something else gets ``NAME-2``); a non-empty folder without a manifest is refused unless
``into_nonempty_folder=True``; a second batch on the same folder stops at once (lock file).
A batch run again into its folder keeps the rows of molecules finished by the earlier run:
the tables list this run's molecules in input order (an earlier row stands until this run
finishes that molecule), then the earlier run's other molecules.
"""

from __future__ import annotations

import inspect
import json
import logging
import os
import re
import time
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from rdkit import Chem, rdBase

from .ensemble import Ensemble
from .errors import InputError
from .thermo import check_temperatures

__all__ = ["search_many", "BatchResult", "read_batch_input", "BATCH_SUFFIXES"]

log = logging.getLogger(__name__)

#: file suffixes :func:`read_batch_input` reads
BATCH_SUFFIXES = (".smi", ".smiles", ".csv", ".tsv", ".sdf", ".sd")

_PARALLEL = ("auto", "molecules", "conformers")
# arguments of pipeline.search that search_many sets itself
_RESERVED = ("molecule", "executor", "workers", "store", "progress", "allow_long")
_PICKLE_OPTIONS = Chem.PropertyPickleOptions.AllProps | Chem.PropertyPickleOptions.CoordsAsDouble
_SOURCE_PROP = "batch_input"  # Mol property naming where a record came from


# ------------------------------------------------------------------------------ result
@dataclass(frozen=True)
class BatchResult:
    """What :func:`search_many` found.

    Attributes
    ----------
    summary : pandas.DataFrame
        One row per molecule, in input order: ``name``, ``smiles`` (canonical, hydrogens
        removed; the input text for a molecule that could not be read), ``status`` ("ok" or
        "failed"), ``conformers`` (active conformers), ``lowest_conformer`` (id of the
        lowest-energy conformer), ``effective_count`` (Kish 1/Σp² at the first temperature;
        ``effective_count_{T}K`` at every temperature),
        ``population_top1_<T>K`` ... ``population_top3_<T>K`` (the three largest conformer
        populations at each temperature, degeneracy included; NaN when there are fewer
        conformers), ``seconds`` (wall time of the molecule's search), ``reason`` (the
        error of a failed molecule, else ""), ``folder`` (its folder under ``out_dir``).
    ensembles : dict of str to Ensemble
        Every ensemble a search returned, by name, in input order: those of the molecules
        that succeeded, and of those whose conformers all failed (no active conformer;
        their tables give each conformer's reason, and they count as failed).
    failures : pandas.DataFrame
        One row per failed molecule: ``name``, ``input``, ``error_type``, ``message``.
    temperatures : tuple of float, K
    parallel : str
        How the batch ran: "molecules" or "conformers" (see the module notes).
    tables : dict of str to pathlib.Path
        With ``out_dir``: where the summary and failure tables were written
        (``{"summary": ..., "failures": ...}``; ``summary-2.csv`` and so on when a file that
        confpop did not write has the usual name). Empty without ``out_dir``.
    """

    summary: pd.DataFrame
    ensembles: dict = field(repr=False)
    failures: pd.DataFrame = field(repr=False)
    temperatures: tuple = (298.15,)
    parallel: str = "molecules"
    tables: dict = field(default_factory=dict, repr=False)

    @property
    def n_ok(self) -> int:
        """Number of molecules that succeeded."""
        return int((self.summary["status"] == "ok").sum())

    @property
    def n_failed(self) -> int:
        """Number of molecules that failed."""
        return int(len(self.failures))

    def _repr_html_(self) -> str:
        from .views import batch_html
        return batch_html(self)

    def __repr__(self) -> str:
        return (f"<BatchResult: {len(self.summary)} molecules, {self.n_ok} ok, "
                f"{self.n_failed} failed>")


@dataclass(frozen=True)
class UnreadableRecord:
    """A record of a batch file that could not be read; searching it fails with ``reason``."""

    reason: str

    def __str__(self) -> str:
        return self.reason


# ------------------------------------------------------------------------------ readers
def read_batch_input(path) -> dict:
    """Read the molecules of a batch file, by name.

    Parameters
    ----------
    path : str or pathlib.Path
        ``.smi``/``.smiles``: one molecule per line, ``SMILES [name]`` (the name is the rest
        of the line); blank lines and lines starting with ``#`` are skipped, and so is a
        header line whose first word is "smiles". ``.csv``/``.tsv``: a column named
        ``smiles`` (any case) and optionally one named ``name`` or ``id``. ``.sdf``/``.sd``:
        one molecule per record, named by the record's title; consecutive records with the
        same non-empty title and the same molecule are read as conformers of one molecule
        (the search starts from the first of them).

    Returns
    -------
    dict of str to (str, rdkit.Chem.Mol or UnreadableRecord)
        In file order. Unnamed molecules are called ``line<N>``, ``row<N>`` or
        ``record<N>`` (1-based, as counted in the file); a repeated name gets ``-2``,
        ``-3``, ... Lines or records that cannot be read are kept (a SMILES as text, an
        unreadable SDF record as :class:`UnreadableRecord`), so that :func:`search_many`
        reports them in its failure list instead of losing them.

    Raises
    ------
    InputError
        If the file does not exist, has another suffix, holds no molecule, or (CSV) has no
        SMILES column (the message lists the columns it has).

    Examples
    --------
    >>> import os, tempfile
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     path = os.path.join(folder, "set.smi")
    ...     with open(path, "w") as handle:
    ...         _ = handle.write("# invented test set\\nCCO ethanol\\nC#N\\n")
    ...     read_batch_input(path)
    {'ethanol': 'CCO', 'line3': 'C#N'}
    """
    if isinstance(path, bytes) or not isinstance(path, (str, os.PathLike)):
        raise InputError(f"path must be a file path, got {type(path).__name__}")
    path = Path(path).expanduser()
    suffix = path.suffix.lower()
    if suffix not in BATCH_SUFFIXES:
        raise InputError(f"batch file must end in one of {', '.join(BATCH_SUFFIXES)}, "
                         f"got {path.name!r}")
    if not path.is_file():
        raise InputError(f"batch file {str(path)!r} does not exist" if not path.exists()
                         else f"batch file {str(path)!r} is not a file")
    if suffix in (".smi", ".smiles"):
        entries = _read_smi(path)
    elif suffix in (".csv", ".tsv"):
        entries = _read_table(path, "\t" if suffix == ".tsv" else ",")
    else:
        entries = _read_sdf_records(path)
    if not entries:
        raise InputError(f"batch file {str(path)!r} holds no molecule")
    return _unique_names(entries)


def _read_text(path: Path) -> str:
    try:
        return path.read_text()
    except UnicodeDecodeError:
        raise InputError(f"batch file {str(path)!r} is not a text file") from None


def _printable(text: str) -> str:
    """Control characters (terminal escape sequences) shown as \\xNN, never passed on."""
    return "".join(ch if ch.isprintable() else f"\\x{ord(ch):02x}" for ch in text)


def _read_smi(path: Path) -> list[tuple[str, str]]:
    from .molecule import SmilesText

    entries = []
    for number, line in enumerate(_read_text(path).splitlines(), start=1):
        text = line.strip()
        if not text or text.startswith("#"):  # '#' inside a SMILES is a triple bond
            continue
        parts = text.split(None, 1)
        if not entries and parts[0].lower() == "smiles":
            continue  # a header line
        name = _printable(parts[1].strip()) if len(parts) > 1 else ""
        entries.append((name or f"line{number}", SmilesText(parts[0])))
    return entries


def _read_table(path: Path, sep: str) -> list[tuple[str, str]]:
    try:
        frame = pd.read_csv(path, sep=sep, dtype=str, keep_default_na=False)
    except pd.errors.EmptyDataError:
        raise InputError(f"batch file {str(path)!r} is empty") from None
    except (pd.errors.ParserError, UnicodeDecodeError) as exc:
        raise InputError(f"batch file {str(path)!r} cannot be read as "
                         f"{'TSV' if sep == chr(9) else 'CSV'}: {exc}") from None
    columns = [str(c) for c in frame.columns]
    smiles_cols = [c for c in columns if c.strip().lower() == "smiles"]
    if not smiles_cols:
        raise InputError(f"batch file {str(path)!r} has no SMILES column: expected a column "
                         f"named 'smiles' (any case); its columns are: "
                         f"{', '.join(repr(c) for c in columns) or 'none'}")
    if len(smiles_cols) > 1:
        raise InputError(f"batch file {str(path)!r} has several SMILES columns "
                         f"({', '.join(smiles_cols)}); keep one")
    name_col = next((c for key in ("name", "id") for c in columns if c.strip().lower() == key),
                    None)
    from .molecule import SmilesText

    entries = []
    for row, (_, record) in enumerate(frame.iterrows(), start=1):
        smiles = str(record[smiles_cols[0]]).strip()
        name = _printable(str(record[name_col]).strip()) if name_col is not None else ""
        entries.append((name or f"row{row}", SmilesText(smiles)))
    return entries


def _read_sdf_records(path: Path) -> list[tuple[str, object]]:
    supplier = Chem.SDMolSupplier()
    supplier.SetData(_read_text(path), sanitize=False, removeHs=False)
    with rdBase.BlockLogs():
        count = len(supplier)
    entries = []
    previous = None  # (title, canonical SMILES) of the last readable record
    for index in range(count):
        number = index + 1
        where = f"record {number} of {path.name}"
        with rdBase.BlockLogs():
            raw = supplier[index]
        if raw is None:
            entries.append((f"record{number}", UnreadableRecord(
                f"{where} is not a readable MOL block (check the counts line and the atom "
                "and bond lines)")))
            previous = None
            continue
        title = _printable(raw.GetProp("_Name").strip()) if raw.HasProp("_Name") else ""
        # the spin state comes from the structure (radicals) or the multiplicity option, as
        # for the ensemble command: an SD field of that name is not read as one
        for prop in ("multiplicity", "charge"):
            if raw.HasProp(prop):
                raw.ClearProp(prop)
        mol = Chem.Mol(raw)
        key = None
        try:
            with rdBase.BlockLogs():
                Chem.SanitizeMol(mol)
                key = (title, Chem.MolToSmiles(Chem.RemoveHs(mol)))
        except Exception:  # noqa: BLE001 - the search explains it (load_molecule)
            mol = Chem.Mol(raw)
        if key is not None and title and key == previous:
            continue  # another conformer of the molecule just read
        previous = key
        mol.SetProp(_SOURCE_PROP, where + (f" ({title!r})" if title else ""))
        entries.append((title or f"record{number}", mol))
    return entries


def _unique_names(entries) -> dict:
    out: dict = {}
    seen: dict[str, int] = {}
    for name, molecule in entries:
        base, k = name, seen.get(name, 0)
        while name in out:
            k += 1
            name = f"{base}-{k + 1}"
        seen[base] = k
        out[name] = molecule
    return out


# ------------------------------------------------------------------------------ the batch
def search_many(molecules, *, names=None, method: str = "gfn2", solvent: str | None = None,
                seed: int = 0, temperatures=(298.15,), executor=None, workers: int | None = None,
                store=None, progress: bool = False, out_dir=None, parallel: str = "auto",
                into_nonempty_folder: bool = False, allow_long: bool = False,
                **search_options) -> BatchResult:
    """Search the conformers of many molecules; one bad molecule never stops the others.

    Parameters
    ----------
    molecules : sequence or mapping
        SMILES strings (an optional name may follow after a space), RDKit molecules, or
        MOL/SDF/XYZ paths, as :func:`confpop.search` takes them; or a mapping name ->
        molecule such as :func:`read_batch_input` returns.
    names : sequence of str, optional
        One unique name per molecule (not with a mapping). Default: the name after a SMILES,
        a molecule's ``_Name``, or ``mol<N>`` (1-based position).
    method, solvent, seed
        As for :func:`confpop.search`; the same for every molecule.
    temperatures : float or sequence of float, K
        Temperatures of the populations in the summary and the files (default 298.15 K).
    executor : concurrent.futures.Executor or dask.distributed.Client, optional
        Where the work runs (see ``parallel``).
    workers : int, optional
        Local worker processes (default: the CPUs this process may use; 1 = everything in
        this process). Not with ``executor``.
    store : str, pathlib.Path or ResultStore, optional
        SQLite result store shared by all molecules: a batch run again (or resumed after an
        interruption) recomputes no finished calculation. With a distributed executor the
        workers open it by path, so it must be on a local file system they all see (SQLite's
        write-ahead log does not work over NFS).
    progress : bool
        Progress bars on stderr (one bar over the molecules, or the stage bars of each
        search when the conformers are spread).
    out_dir : str or pathlib.Path, optional
        Write one folder per molecule plus ``summary.csv`` and ``failures.csv`` here, each
        molecule as soon as it finishes (see the module notes). Checked, created and locked
        before any work.
    allow_long : bool
        Search molecules whose estimated cost (:func:`confpop.budget.estimate_search`) is above
        :data:`confpop.budget.MAX_CPU_HOURS`. Default False: each such molecule fails, before
        its search starts, with the estimate as its reason.
    into_nonempty_folder : bool
        Allow an ``out_dir`` that holds files confpop did not write (they are never replaced:
        a name they take gets a free one beside it). Default False: such a folder is refused.
    parallel : {"auto", "molecules", "conformers"}
        Spread whole molecules or each molecule's conformers over the workers (see the
        module notes).
    **search_options
        Any other keyword of :func:`confpop.search` (``energy_window``, ``n_trials``,
        ``stereo``, ...), used for every molecule.

    Returns
    -------
    BatchResult
        ``summary`` (one row per molecule), ``ensembles`` (by name), ``failures``.

    Raises
    ------
    InputError
        For arguments that no molecule could use (an unknown method or option, bad
        temperatures, names that do not match, an empty list).
    BackendUnavailable
        If the method's engine is not installed.
    StoreError
        If ``store`` is not a usable result store (checked before any work).

    Notes
    -----
    A failed molecule's ``reason`` is ``"<ErrorType>: <message>"`` of the error its search
    raised (unreadable input, a method without parameters for an element, every conformer
    failing). A worker process that dies inside a molecule (a crash in compiled code) costs
    only that molecule, which is tried once more and then listed with error type
    ``BrokenProcessPool``.

    Examples
    --------
    >>> result = search_many(["CCO ethanol", "C1CC"], method="mmff94s", workers=1)
    >>> result.summary[["name", "status", "conformers"]]
          name  status  conformers
    0  ethanol      ok           2
    1     mol2  failed           0
    >>> result.failures.loc[0, "error_type"]
    'InputError'
    """
    from .backends import backend_class
    from .pipeline import search

    entries = _entries(molecules, names)
    temps = _check_temperatures(temperatures)
    method = method.lower() if isinstance(method, str) else method
    cls = backend_class(method)  # unknown method or missing engine: fail before any work
    if solvent is not None and "solvent" not in cls.capabilities:
        raise InputError(f"method {method!r} has no implicit solvent model; got solvent={solvent!r}")
    allowed = set(inspect.signature(search).parameters) - {"method", "solvent", "seed"}
    for key in search_options:
        if key in _RESERVED or key not in allowed:
            raise InputError(f"search_many got an unknown or reserved option {key!r}; the "
                             f"options passed on to search are: {', '.join(sorted(allowed - set(_RESERVED)))}")
    # the search's population cut follows the temperatures the summary reports
    search_options = {"temperatures": temps, **search_options}
    if parallel not in _PARALLEL:
        raise InputError(f"parallel must be one of {', '.join(_PARALLEL)}, got {parallel!r}")
    if executor is not None and workers is not None:
        raise InputError("give either executor= or workers= (workers sizes the local pool), "
                         "not both")
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int)
                                or workers < 1):
        raise InputError(f"workers must be an int >= 1, got {workers!r}")
    opened = None
    if store is not None and not hasattr(store, "get"):
        from .store import ResultStore
        store = opened = ResultStore(store)  # a bad file fails here, before any work
    if allow_long not in (True, False):
        raise InputError(f"allow_long must be True or False, got {allow_long!r}")
    if into_nonempty_folder not in (True, False):
        raise InputError(f"into_nonempty_folder must be True or False, got {into_nonempty_folder!r}")
    mode = _choose_mode(parallel, len(entries), executor, workers)
    try:
        writer = _Writer(out_dir, entries, temps, allow_nonempty=into_nonempty_folder)
    except BaseException:
        if opened is not None:
            opened.close()
        raise
    settings = {"method": method, "solvent": solvent, "seed": seed, "options": search_options,
                "allow_long": allow_long}
    log.info("batch of %d molecules, method %s, parallel over %s", len(entries), method, mode)
    try:
        if mode == "molecules":
            _run_molecules(entries, settings, executor, workers, store, progress, writer)
        else:
            _run_conformers(entries, settings, executor, workers, store, progress, writer)
        writer.write_tables()
    finally:
        writer.close()
        if opened is not None:
            opened.close()
    return writer.result(mode)


def _entries(molecules, names) -> list[dict]:
    """[{index, name, molecule, input}] with unique names; checks the arguments."""
    if isinstance(molecules, (str, bytes, os.PathLike, Chem.Mol)):
        raise InputError("molecules must be a list of molecules (or a dict name -> molecule), "
                         f"got a single {type(molecules).__name__}; for a .smi/.csv/.sdf file "
                         "use search_many(read_batch_input(path))")
    if isinstance(molecules, Mapping):
        if names is not None:
            raise InputError("names= cannot be given with a mapping of molecules (its keys "
                             "are the names)")
        names = [str(k) for k in molecules]
        molecules = list(molecules.values())
    else:
        try:
            molecules = list(molecules)
        except TypeError:
            raise InputError(f"molecules must be a list of molecules, got "
                             f"{type(molecules).__name__}") from None
    if not molecules:
        raise InputError("molecules is empty: give at least one molecule")
    if names is None:
        names = [_default_name(m, k) for k, m in enumerate(molecules, start=1)]
        names = list(_unique_names(zip(names, range(len(names)))))
    else:
        if isinstance(names, str):
            raise InputError("names must be a list of str, one per molecule, got a single str")
        names = list(names)
        if len(names) != len(molecules):
            raise InputError(f"names must hold one name per molecule ({len(molecules)}), "
                             f"got {len(names)}")
        bad = [n for n in names if not isinstance(n, str) or not n.strip()]
        if bad:
            raise InputError(f"each name must be a non-empty str, got {bad[0]!r}")
        repeated = sorted({n for n in names if names.count(n) > 1})
        if repeated:
            raise InputError(f"names must be unique; repeated: {', '.join(repeated)}")
    folders = _folders(names)
    return [{"index": k, "name": n, "molecule": m, "input": _input_text(m), "folder": f}
            for k, (n, m, f) in enumerate(zip(names, molecules, folders))]


def _default_name(molecule, k: int) -> str:
    if isinstance(molecule, str) and len(molecule.split(None, 1)) == 2:
        return molecule.split(None, 1)[1].strip()
    if isinstance(molecule, Chem.Mol) and molecule.HasProp("_Name") \
            and molecule.GetProp("_Name").strip():
        return molecule.GetProp("_Name").strip()
    return f"mol{k}"


def _input_text(molecule) -> str:
    if isinstance(molecule, (str, os.PathLike)):
        return str(molecule)
    if isinstance(molecule, Chem.Mol):
        if molecule.HasProp(_SOURCE_PROP):
            return molecule.GetProp(_SOURCE_PROP)
        try:
            with rdBase.BlockLogs():
                return Chem.MolToSmiles(molecule)
        except Exception:  # noqa: BLE001 - only a label
            return "RDKit Mol"
    return str(molecule)


def _folders(names: list[str]) -> list[str]:
    """File-system-safe folder names, unique even on case-insensitive file systems."""
    out, taken = [], set()
    for name in names:
        base = re.sub(r"[^A-Za-z0-9._+-]+", "_", name).strip("._") or "molecule"
        base = base[:80]
        folder, k = base, 1
        while folder.lower() in taken or folder.lower() in ("summary.csv", "failures.csv"):
            k += 1
            folder = f"{base}-{k}"
        taken.add(folder.lower())
        out.append(folder)
    return out


def _check_temperatures(temperatures) -> tuple[float, ...]:
    return tuple(check_temperatures(temperatures, "temperatures"))


def _slots(executor, workers) -> int:
    """How many units can run at once where the work goes."""
    from .execution import default_workers

    if executor is None:
        return default_workers() if workers is None else workers
    client = executor if callable(getattr(executor, "nthreads", None)) \
        else getattr(executor, "_client", None)  # a dask Client, or its executor
    if client is not None:
        try:
            return max(1, sum(client.nthreads().values()))
        except Exception:  # noqa: BLE001 - cannot ask: assume a wide cluster
            return 1
    return max(1, int(getattr(executor, "_max_workers", 1) or 1))


def _choose_mode(parallel: str, n_molecules: int, executor, workers) -> str:
    if parallel != "auto":
        return parallel
    return "molecules" if n_molecules >= _slots(executor, workers) else "conformers"


# ------------------------------------------------------------------------------ running
def _size_estimate(molecule) -> int:
    """Heavy atoms + rotatable bonds of a SMILES or Mol (0 if unknown): larger ones go first."""
    mol = None
    if isinstance(molecule, Chem.Mol):
        mol = molecule
    elif isinstance(molecule, str) and not os.path.exists(molecule.strip()):
        with rdBase.BlockLogs():
            mol = Chem.MolFromSmiles(molecule.split(None, 1)[0]) if molecule.strip() else None
    if mol is None:
        return 0
    from rdkit.Chem import rdMolDescriptors
    try:
        return mol.GetNumHeavyAtoms() + 3 * rdMolDescriptors.CalcNumRotatableBonds(mol)
    except Exception:  # noqa: BLE001 - an unsanitized molecule
        return mol.GetNumHeavyAtoms()


def _encode(molecule):
    """A Mol as bytes with every property and double-precision coordinates."""
    if isinstance(molecule, Chem.Mol):
        return ("mol", molecule.ToBinary(_PICKLE_OPTIONS))
    if isinstance(molecule, os.PathLike):
        return ("path", os.fspath(molecule))
    return ("text", molecule)


def _decode(payload):
    kind, value = payload
    if kind == "mol":
        return Chem.Mol(value)
    if kind == "path":
        return Path(value)
    if isinstance(value, UnreadableRecord):
        raise InputError(value.reason)
    return value


def _pack(ens: Ensemble) -> dict:
    # Pickling the Ensemble itself would store the RDKit coordinates in single precision
    return {"mol": ens.mol.ToBinary(_PICKLE_OPTIONS), "table": ens.raw_table, "level": ens.level,
            "charge": ens.charge, "multiplicity": ens.multiplicity, "solvent": ens.solvent,
            "provenance": ens.provenance, "name": ens.name}


def _unpack(packed: dict) -> Ensemble:
    return Ensemble(Chem.Mol(packed["mol"]), packed["table"], level=packed["level"],
                    charge=packed["charge"], multiplicity=packed["multiplicity"],
                    solvent=packed["solvent"], provenance=packed["provenance"],
                    name=packed["name"])


def _check_budget(molecule, settings: dict) -> None:
    """Refuse (as this molecule's failure) a search estimated above the bound."""
    if settings.get("allow_long"):
        return
    from .budget import check_search_budget
    from .molecule import _load

    options = settings["options"]
    try:
        mol = _load(molecule, charge=options.get("charge"),
                    multiplicity=options.get("multiplicity"),
                    keep_largest_fragment=options.get("keep_largest_fragment", False),
                    stereo="ignore", method=None, name=None, warn_open_stereo=False)
    except InputError:
        return  # the search itself reports why the molecule cannot be read
    extra = {k: options[k] for k in ("moves", "target_overlap", "max_rounds") if k in options}
    check_search_budget(mol, method=settings["method"], n_trials=options.get("n_trials"),
                        option="allow_long=True (--allow-long-run)", **extra)


def _search_unit(item: dict) -> dict:
    """One molecule's whole search, serial: a picklable unit of work; errors become data."""
    from .pipeline import search

    start = time.perf_counter()
    try:
        molecule = _decode(item["molecule"])
        _check_budget(molecule, item)
        # the budget was checked just above with the batch's own policy
        ens = search(molecule, method=item["method"], solvent=item["solvent"], seed=item["seed"],
                     workers=1, store=item["store"], progress=False, allow_long=True,
                     **item["options"])
    except Exception as exc:  # one molecule's failure must not stop the batch
        return {"ok": False, "error_type": type(exc).__name__, "message": str(exc),
                "seconds": time.perf_counter() - start}
    return {"ok": True, "ensemble": _pack(ens), "seconds": time.perf_counter() - start}


class _Arrivals:
    """Takes the place of a result store in run_units to hear of each unit as it finishes.

    run_units calls ``put`` in the calling process as soon as a unit succeeds (the store's
    documented write-as-it-arrives behaviour); nothing is ever found (``record`` is None).
    """

    def __init__(self, callback):
        self.callback = callback

    def record(self, key):
        return None

    def get(self, key, default=None):
        return default

    def put(self, key, value, *, seconds=None) -> None:
        self.callback(int(key), value)


def _run_molecules(entries, settings, executor, workers, store, progress, writer) -> None:
    from .execution import run_units

    order = list(range(len(entries)))
    if executor is not None or workers != 1:  # parallel: the largest first, for a short tail
        order.sort(key=lambda k: -_size_estimate(entries[k]["molecule"]))
    items = [{"molecule": _encode(entries[k]["molecule"]), "store": store, **settings}
             for k in order]
    arrivals = _Arrivals(lambda position, value: writer.finished(order[position], value))
    outcomes = run_units(_search_unit, items, executor=executor, workers=workers,
                         progress=progress, description="molecules", store=arrivals,
                         keys=[str(p) for p in range(len(items))])
    for position, outcome in enumerate(outcomes):
        k = order[position]
        if writer.done(k):
            continue
        if outcome.ok:  # not announced through put (should not happen)
            writer.finished(k, outcome.value)
        else:  # the worker died or the executor failed the unit
            writer.finished(k, {"ok": False, "error_type": outcome.error_type,
                                "message": outcome.error_message, "seconds": outcome.seconds})


def _run_conformers(entries, settings, executor, workers, store, progress, writer) -> None:
    from .execution import _check_workers, default_workers
    from .pipeline import search, search_pool

    # One local pool for the whole batch (pool_scope, its workers preloaded with the engine):
    # every search and stage inside runs on it, and a worker that dies is replaced (the unit
    # it ran is charged one attempt) instead of failing the molecules after it.
    # capped once here (one warning for the batch, not one per search and stage)
    n_local = (default_workers() if workers is None else _check_workers(workers)) \
        if executor is None else 1
    where = {"executor": executor} if executor is not None else {"workers": n_local}
    with search_pool(settings["method"], executor, n_local):
        for k, entry in enumerate(entries):
            start = time.perf_counter()
            try:
                molecule = _decode(_encode(entry["molecule"]))
                _check_budget(molecule, settings)
                ens = search(molecule, method=settings["method"], solvent=settings["solvent"],
                             seed=settings["seed"], store=store, progress=progress, **where,
                             allow_long=True, **settings["options"])
            except Exception as exc:  # one molecule's failure must not stop the batch
                value = {"ok": False, "error_type": type(exc).__name__, "message": str(exc),
                         "seconds": time.perf_counter() - start}
            else:
                value = {"ok": True, "ensemble": ens, "seconds": time.perf_counter() - start}
            writer.finished(k, value)


# ------------------------------------------------------------------------------ collecting
def _no_survivor_message(ens: Ensemble) -> str:
    reasons = sorted({str(r) for r in ens.raw_table["reason"] if str(r)})
    return "no conformer survived; reasons: " + ("; ".join(reasons) or "none recorded")


def _summary_columns(temps) -> list[str]:
    return (["name", "smiles", "status", "conformers", "lowest_conformer", "effective_count"]
            + [f"effective_count_{t:g}K" for t in temps]
            + [f"population_top{rank}_{t:g}K" for t in temps for rank in (1, 2, 3)]
            + ["seconds", "reason", "folder"])


def _summary_row(entry: dict, value: dict, temps) -> dict:
    from .thermo import effective_conformer_count

    row = dict.fromkeys(_summary_columns(temps), np.nan)
    row.update({"name": entry["name"], "smiles": "", "status": "failed", "conformers": 0,
                "lowest_conformer": None, "seconds": float(value.get("seconds") or 0.0),
                "reason": "", "folder": entry["folder"]})
    ens = value.get("ensemble")
    if not value["ok"]:
        if isinstance(entry["molecule"], str) and entry["molecule"].strip():
            row["smiles"] = entry["molecule"].split(None, 1)[0]
        row["reason"] = f"{value['error_type']}: {value['message']}"
        return row
    row["smiles"] = next((p.get("smiles", "") for p in ens.provenance if p.get("step") == "input"),
                         "")
    row["conformers"] = len(ens)
    if not len(ens):
        row["reason"] = f"CalculationFailed: {_no_survivor_message(ens)}"
        return row
    row["status"] = "ok"
    if len(ens):
        row["lowest_conformer"] = int(ens.energies().idxmin())
        pops = ens.populations(list(temps))
        row["effective_count"] = float(effective_conformer_count(pops[temps[0]].to_numpy()))
        for t in temps:
            row[f"effective_count_{t:g}K"] = float(effective_conformer_count(pops[t].to_numpy()))
            top = np.sort(pops[t].to_numpy())[::-1][:3]
            for rank, p in enumerate(top, start=1):
                row[f"population_top{rank}_{t:g}K"] = float(p)
    return row


class _Writer:
    """Collects each molecule's outcome as it arrives; writes its files at once.

    With ``out_dir`` the folder is an :class:`~confpop.outdir.OutputFolder`: opened (created,
    locked, checked) here, before any work; rows of molecules that an earlier run finished
    there are kept in the tables until this run finishes the same name.
    """

    def __init__(self, out_dir, entries, temps, allow_nonempty=False):
        self.entries = entries
        self.temps = temps
        self.rows: dict[int, dict] = {}
        self.ensembles: dict[int, Ensemble] = {}
        self.failures: dict[int, dict] = {}
        self.folder = None
        self.earlier_rows: list[dict] = []
        self.earlier_failures: list[dict] = []
        self.table_names = {"summary": "summary.csv", "failures": "failures.csv"}
        if out_dir is None:
            return
        from .outdir import OutputFolder

        self.folder = OutputFolder(out_dir, kind="batch", allow_nonempty=allow_nonempty)
        try:
            folder = self.folder
            self.table_names = {kind: folder.claim(name, key=f"table:{kind}")
                                for kind, name in self.table_names.items()}
            avoid = {n.lower() for n in self.table_names.values()}
            for entry in entries:
                entry["folder"] = folder.claim(entry["folder"], key=f"molecule:{entry['name']}",
                                               avoid=avoid)
                avoid.add(entry["folder"].lower())
            self.earlier_rows = self._earlier(self.table_names["summary"])
            self.earlier_failures = self._earlier(self.table_names["failures"])
            folder.save()
        except BaseException:
            self.folder.close()
            raise

    @property
    def out(self):
        return None if self.folder is None else self.folder.path

    def close(self) -> None:
        if self.folder is not None:
            self.folder.close()

    def _earlier(self, name: str) -> list[dict]:
        """Rows of a table an earlier run wrote here (empty if none or unreadable)."""
        if not self.folder.ours(name) or not (self.out / name).is_file():
            return []
        try:
            frame = pd.read_csv(self.out / name, keep_default_na=True)
        except (OSError, ValueError, pd.errors.ParserError) as exc:
            log.warning("%s: earlier table %s cannot be read (%s); it is rewritten from this "
                        "run", self.out, name, exc)
            return []
        if "name" not in frame.columns:
            return []
        frame["name"] = frame["name"].astype(str)
        return frame.to_dict(orient="records")

    def done(self, k: int) -> bool:
        return k in self.rows

    def finished(self, k: int, value: dict) -> None:
        entry = self.entries[k]
        if value.get("ok") and isinstance(value.get("ensemble"), dict):
            value = {**value, "ensemble": _unpack(value["ensemble"])}
        self.rows[k] = _summary_row(entry, value, self.temps)
        ens = value["ensemble"] if value.get("ok") else None
        if ens is not None:
            self.ensembles[k] = ens
        if ens is not None and len(ens):
            log.info("molecule %s: %d conformers (%.1f s)", entry["name"], len(ens),
                     value.get("seconds") or 0.0)
        else:
            error_type, message = ((value["error_type"], value["message"]) if ens is None
                                   else ("CalculationFailed", _no_survivor_message(ens)))
            self.failures[k] = {"name": entry["name"], "input": entry["input"],
                                "error_type": error_type, "message": message}
            log.info("molecule %s failed: %s: %s", entry["name"], error_type, message)
        if self.folder is not None:
            if ens is not None:
                self._write_molecule(entry, ens)
            self.write_tables()

    def _write_molecule(self, entry: dict, ens: Ensemble) -> None:
        from .writing import ensemble_json

        payload = ensemble_json(ens, self.temps, input_text=entry["input"])
        payload["name"] = entry["name"]

        def run_json(path):
            with open(path, "w") as handle:
                json.dump(payload, handle, indent=2)
                handle.write("\n")

        self.folder.write_folder(entry["folder"], {
            "ensemble.sdf": lambda path: ens.to_sdf(path),
            "table.csv": lambda path: ens.to_csv(path, self.temps),
            "run.json": run_json})

    def frames(self) -> tuple[pd.DataFrame, pd.DataFrame]:
        order = sorted(self.rows)
        summary = pd.DataFrame([self.rows[k] for k in order],
                               columns=_summary_columns(self.temps))
        summary["conformers"] = summary["conformers"].astype(int)
        summary["lowest_conformer"] = summary["lowest_conformer"].astype("Int64")
        failures = pd.DataFrame([self.failures[k] for k in sorted(self.failures)],
                                columns=["name", "input", "error_type", "message"])
        return summary, failures

    def merged_frames(self) -> tuple[pd.DataFrame, pd.DataFrame]:
        """The tables as written: this run's rows, and rows an earlier run wrote here for
        molecules this run has not (yet) finished, in this run's input order, then the rest."""
        summary, failures = self.frames()
        done = {self.entries[k]["name"] for k in self.rows}
        order = {e["name"]: i for i, e in enumerate(self.entries)}

        def merge(frame, earlier, failed_now):
            keep = [r for r in earlier if r["name"] not in done]
            if not keep:
                return frame
            rows = frame.to_dict(orient="records") + keep
            rows.sort(key=lambda r: order.get(r["name"], len(order)))  # stable: rest at the end
            columns = list(frame.columns) + [c for r in keep for c in r if c not in frame.columns]
            return pd.DataFrame(rows, columns=list(dict.fromkeys(columns)))

        return (merge(summary, self.earlier_rows, None),
                merge(failures, self.earlier_failures, None))

    def write_tables(self) -> None:
        if self.folder is None:
            return
        summary, failures = self.merged_frames()
        for frame, kind in ((summary, "summary"), (failures, "failures")):
            self.folder.write_file(self.table_names[kind],
                                   lambda path, frame=frame: frame.to_csv(path, index=False))

    def result(self, mode: str) -> BatchResult:
        summary, failures = self.frames()
        ensembles = {self.entries[k]["name"]: self.ensembles[k] for k in sorted(self.ensembles)}
        tables = {} if self.folder is None else \
            {kind: self.out / name for kind, name in self.table_names.items()}
        return BatchResult(summary=summary, ensembles=ensembles, failures=failures,
                           temperatures=self.temps, parallel=mode, tables=tables)
