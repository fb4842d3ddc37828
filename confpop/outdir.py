"""Output folders that confpop writes into without harming anything else there.

An :class:`OutputFolder` is what ``batch --out`` and ``ensemble --out`` write through. It
promises:

- **Nothing foreign is deleted or overwritten.** A manifest (``.confpop-manifest.json``)
  lists every file and folder confpop wrote there; only those are ever replaced. A name
  that is taken by something not in the manifest is never touched: the new file or folder
  gets a free name beside it (``ethanol-2``, ``summary-2.csv``).
- **A non-empty folder that confpop did not write is refused** (one line naming the folder)
  unless the caller says ``allow_nonempty=True`` (``--into-nonempty-folder`` on the
  command line); even then the rule above holds.
- **No partial files.** Every file is written under a temporary name in the same folder and
  renamed into place when complete (a rename within one file system is atomic), so a
  crash, a full disk or a kill leaves either the old file or the new one. A failed write
  removes its temporary file and raises :class:`~confpop.errors.OutputError` naming the file.
- **One run at a time.** A lock file (``.confpop-lock``, an advisory ``flock`` held while the
  folder is open; the kernel releases it when the process ends, even after SIGKILL) makes a
  second run on the same folder stop at once with a line naming the process that holds it.
  ``flock`` is not reliable on some network file systems.
- **Checked before any work.** Opening the folder creates it, takes the lock and writes the
  manifest, so a read-only or missing location fails before a calculation starts.
"""

from __future__ import annotations

import errno
import json
import logging
import os
import re
from pathlib import Path

from .errors import InputError, OutputError

__all__ = ["OutputFolder", "MANIFEST", "LOCK", "atomic_write", "check_output_file",
           "WRITTEN_MARK", "written_by_confpop"]

log = logging.getLogger(__name__)

#: the record of what confpop wrote into a folder
MANIFEST = ".confpop-manifest.json"
#: the lock file of a folder in use
LOCK = ".confpop-lock"
_LAYOUT = 1
# the temporary name of _temporary_name: .STEM.partial-PID[.SUFFIX]
_TEMPORARY = re.compile(r"^\.(.+?)\.partial-(\d+)(\.[^.]+)?$")
_OURS = (MANIFEST, LOCK)


def _describe(exc: OSError) -> str:
    if exc.errno == errno.ENOSPC:
        return "no space left on the device"
    if exc.errno == errno.EDQUOT:
        return "disk quota exceeded"
    if exc.errno in (errno.EACCES, errno.EPERM):
        return "permission denied"
    if exc.errno == errno.EROFS:
        return "read-only file system"
    return exc.strerror or str(exc)


def _flush_to_disk(path: Path) -> None:
    """fsync a finished temporary file before it is renamed into place (a late write error
    shows here, not after the rename)."""
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _temporary_name(final: Path) -> Path:
    """A hidden name beside ``final`` with the same suffix (plot formats follow suffixes)."""
    return final.with_name(f".{final.stem}.partial-{os.getpid()}{final.suffix}")


def atomic_write(final, write) -> None:
    """Call ``write(temporary_path)``, then rename the result onto ``final``.

    On any failure the temporary file is removed and ``final`` is left as it was; an
    ``OSError`` becomes :class:`~confpop.errors.OutputError` naming ``final``.
    """
    final = Path(final)
    temporary = _temporary_name(final)
    try:
        write(temporary)
        _flush_to_disk(temporary)
        os.replace(temporary, final)
    except BaseException as exc:
        try:
            temporary.unlink()
        except OSError:
            pass
        if isinstance(exc, OSError):
            raise OutputError(f"cannot write {str(final)!r}: {_describe(exc)}; nothing was "
                              "left half-written") from None
        raise


#: Put into every single file confpop writes outside an output folder (a figure's
#: Creator/Software metadata, a comment in an HTML report), so that a later run can tell its
#: own file, which it may replace, from anyone else's, which it never does.
WRITTEN_MARK = "written by confpop"


def written_by_confpop(path) -> bool:
    """Whether the file at ``path`` carries :data:`WRITTEN_MARK` (in its first MiB or last
    64 KiB, where PNG text chunks, PDF/SVG/PS metadata and the HTML comment sit)."""
    mark = WRITTEN_MARK.encode()
    try:
        with open(path, "rb") as fh:
            head = fh.read(1 << 20)
            if mark in head:
                return True
            fh.seek(0, os.SEEK_END)
            size = fh.tell()
            if size <= len(head):
                return False
            fh.seek(max(size - (1 << 16), 0))
            return mark in fh.read()
    except OSError:
        return False


def check_output_file(path, option: str, *, replace: bool = False,
                      replace_option: str = "--overwrite") -> Path:
    """Check before any work that a file can be written at ``path`` (its folder exists and
    is writable, and ``path`` is not a folder); return it as a Path.

    An existing file that confpop did not write (no :data:`WRITTEN_MARK`) is refused unless
    ``replace``: confpop never replaces what it did not write without being told to
    (``replace_option`` names how)."""
    if isinstance(path, bytes) or not isinstance(path, (str, os.PathLike)) or not str(path):
        raise InputError(f"{option} must be a file path, got {path!r}")
    path = Path(path).expanduser()
    folder = path.parent if str(path.parent) else Path(".")
    if path.is_dir():
        raise InputError(f"{option} {str(path)!r} is a folder; give a file name")
    if not folder.is_dir():
        raise InputError(f"{option} {str(path)!r}: the folder {str(folder)!r} does not exist")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise InputError(f"{option} {str(path)!r}: the folder {str(folder)!r} is not writable")
    if path.exists() and not os.access(path, os.W_OK):
        raise InputError(f"{option} {str(path)!r} exists and is not writable")
    if path.exists() and not replace and not written_by_confpop(path):
        raise InputError(f"{option} {str(path)!r} exists and was not written by confpop; "
                         f"choose another file name, or give {replace_option} to replace it")
    return path


class OutputFolder:
    """A folder confpop writes into (see the module notes for what it promises).

    Parameters
    ----------
    path : str or os.PathLike
        The folder; created (with its parents) if missing.
    kind : str
        What the folder holds ("batch", "ensemble"); recorded in the manifest.
    allow_nonempty : bool
        Write into a non-empty folder that has no confpop manifest (never replacing what is
        there). Default False: such a folder is refused.
    option : str
        How messages name the folder (default "output folder"; ``"--out"`` on the command
        line).

    Raises
    ------
    InputError
        If ``path`` is a file, a non-empty folder confpop did not write (without
        ``allow_nonempty``), or in use by another confpop run.
    OutputError
        If the folder cannot be created or written.
    """

    def __init__(self, path, *, kind: str, allow_nonempty: bool = False,
                 option: str = "output folder"):
        if isinstance(path, bytes) or not isinstance(path, (str, os.PathLike)) or not str(path):
            raise InputError(f"{option} must be a folder path, got {path!r}")
        self.path = Path(path).expanduser()
        self.option = option
        self.kind = kind
        self._lock_fd = None
        if self.path.exists() and not self.path.is_dir():
            raise InputError(f"{option} {str(self.path)!r} exists and is not a folder")
        if self.path.is_dir() and not (self.path / MANIFEST).exists() and not allow_nonempty:
            try:
                others = sorted(p.name for p in self.path.iterdir() if p.name not in _OURS)
            except OSError as exc:
                raise OutputError(f"cannot read {option} {str(self.path)!r}: "
                                  f"{_describe(exc)}") from None
            if others:
                shown = ", ".join(others[:3]) + (", ..." if len(others) > 3 else "")
                raise InputError(
                    f"{option} {str(self.path)!r} is not empty ({shown}) and was not written by "
                    f"confpop (it has no {MANIFEST}); choose a new or empty folder, or allow "
                    "writing beside those files (--into-nonempty-folder on the command line, "
                    "into_nonempty_folder=True in Python), which never replaces them")
        try:
            self.path.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise OutputError(f"cannot create {option} {str(self.path)!r}: "
                              f"{_describe(exc)}") from None
        self._lock()
        try:
            self.manifest = self._read_manifest()
            self.manifest["kind"] = kind
            self._cleanup_partials()
            self.save()  # proves the folder writable before any work
        except BaseException:
            self.close()
            raise

    # -- locking -----------------------------------------------------------------------------
    def _lock(self) -> None:
        lock = self.path / LOCK
        try:
            fd = os.open(lock, os.O_RDWR | os.O_CREAT, 0o644)
        except OSError as exc:
            raise OutputError(f"cannot write in {self.option} {str(self.path)!r} ({LOCK}): "
                              f"{_describe(exc)}") from None
        try:
            import fcntl
        except ImportError:  # not POSIX: no lock
            self._lock_fd = fd
            return
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError as exc:
            holder = ""
            try:
                holder = os.pread(fd, 64, 0).decode("ascii", "replace").strip()
            except OSError:
                pass
            os.close(fd)
            if exc.errno in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
                raise InputError(
                    f"{self.option} {str(self.path)!r} is in use by another confpop run"
                    f"{' (process ' + holder + ')' if holder.isdigit() else ''}; wait for it "
                    "to finish or choose another folder") from None
            raise OutputError(f"cannot lock {self.option} {str(self.path)!r}: "
                              f"{_describe(exc)}") from None
        os.ftruncate(fd, 0)
        os.pwrite(fd, f"{os.getpid()}\n".encode("ascii"), 0)
        self._lock_fd = fd

    def close(self) -> None:
        """Release the lock (the lock file stays: it is confpop's). Safe to repeat."""
        fd, self._lock_fd = self._lock_fd, None
        if fd is not None:
            try:
                os.close(fd)  # closing the descriptor releases the flock
            except OSError:
                pass

    def __enter__(self) -> OutputFolder:
        return self

    def __exit__(self, *exc_info) -> None:
        self.close()

    # -- the manifest ------------------------------------------------------------------------
    def _read_manifest(self) -> dict:
        path = self.path / MANIFEST
        empty = {"application": "confpop", "layout": _LAYOUT, "kind": self.kind, "files": [],
                 "names": {}, "partial": []}
        if not path.exists():
            return empty
        try:
            data = json.loads(path.read_text())
        except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
            raise InputError(f"{self.option} {str(self.path)!r}: its {MANIFEST} cannot be read "
                             f"({exc}); move the folder away or choose another") from None
        if not isinstance(data, dict) or data.get("application") != "confpop" \
                or not isinstance(data.get("files"), list) \
                or not all(isinstance(f, str) for f in data["files"]) \
                or not isinstance(data.get("names", {}), dict):
            raise InputError(f"{self.option} {str(self.path)!r}: its {MANIFEST} is not a confpop "
                             "manifest; move the folder away or choose another")
        out = {**empty, **data}
        out["files"] = [f for f in data["files"] if _inside(f)]
        out["names"] = {str(k): str(v) for k, v in out["names"].items() if _inside(str(v))}
        out["partial"] = [f for f in out.get("partial", []) if isinstance(f, str) and _inside(f)]
        return out

    def save(self) -> None:
        """Write the manifest (atomically)."""
        self.manifest["files"] = sorted(set(self.manifest["files"]))
        text = json.dumps(self.manifest, indent=1, sort_keys=True) + "\n"
        atomic_write(self.path / MANIFEST, lambda p: Path(p).write_text(text))

    def ours(self, relative: str) -> bool:
        """True if confpop wrote ``relative`` (a file or folder inside the folder)."""
        return relative.rstrip("/") in {f.rstrip("/") for f in self.manifest["files"]}

    def _taken(self, relative: str) -> bool:
        """True if ``relative`` exists (any case) and is not confpop's."""
        parent = (self.path / relative).parent
        name = Path(relative).name.lower()
        try:
            existing = [p.name for p in parent.iterdir()]
        except OSError:
            return False
        prefix = str(Path(relative).parent)
        prefix = "" if prefix == "." else prefix + "/"
        return any(e.lower() == name and not self.ours(prefix + e) for e in existing)

    def claim(self, relative: str, *, key: str | None = None, avoid=()) -> str:
        """A free name for a file or folder: ``relative`` itself unless something foreign
        has it (or it is in ``avoid``, compared without case), else ``stem-2``, ``stem-3``...

        With ``key``, the name given to that key by an earlier run is kept, and the name
        chosen is remembered for later runs.
        """
        if key is not None and key in self.manifest["names"]:
            known = self.manifest["names"][key]
            if not self._taken(known):
                return known
        avoid = {a.lower() for a in avoid} | {a.lower() for a in _OURS}
        if key is not None:  # names that earlier runs gave to other keys
            avoid |= {v.lower() for k, v in self.manifest["names"].items() if k != key}
        path = Path(relative)
        stem, suffix = (path.stem, path.suffix) if path.suffix else (path.name, "")
        candidate, k = relative, 1
        while candidate.lower() in avoid or self._taken(candidate):
            k += 1
            candidate = str(path.with_name(f"{stem}-{k}{suffix}"))
        if candidate != relative:
            log.info("%s: %r is taken by a file confpop did not write; using %r",
                     self.path, relative, candidate)
        if key is not None:
            self.manifest["names"][key] = candidate
        return candidate

    # -- writing -----------------------------------------------------------------------------
    def write_file(self, relative: str, write) -> Path:
        """Write one file by ``write(temporary_path)`` and rename it to ``relative``.

        ``relative`` must be free or confpop's (see :meth:`claim`).
        """
        if self._taken(relative):
            raise OutputError(f"{str(self.path / relative)!r} was not written by confpop and "
                              "is left alone")
        final = self.path / relative
        if not self.ours(relative):  # record first: a name in the manifest may not exist yet,
            self.manifest["files"].append(relative)  # but a file never lacks its record
            self.save()
        atomic_write(final, write)
        return final

    def write_folder(self, relative: str, files: dict) -> Path:
        """Write a folder of files ``{name: write(temporary_path)}``.

        A new folder is filled under a hidden temporary name and renamed when complete; a
        folder confpop wrote before gets each file replaced atomically, and files there that
        confpop did not write stay as they are.
        """
        final = self.path / relative
        if self._taken(relative):
            raise OutputError(f"{str(final)!r} was not written by confpop and is left alone")
        if final.is_dir():
            for name in files:
                if self._taken(f"{relative}/{name}"):
                    raise OutputError(f"{str(final / name)!r} was not written by confpop and is "
                                      "left alone")
            self.manifest["files"] += [f"{relative}/{name}" for name in files]
            self.save()
            for name, write in files.items():
                atomic_write(final / name, write)
            return final
        partial_name = f".{Path(relative).name}.partial-{os.getpid()}"
        partial = final.with_name(partial_name)
        partial_record = str(Path(relative).with_name(partial_name))
        self.manifest["partial"].append(partial_record)
        self.manifest["files"] += [relative + "/"] + [f"{relative}/{n}" for n in files]
        self.save()
        try:
            partial.mkdir()
            for name, write in files.items():
                try:
                    write(partial / name)
                    _flush_to_disk(partial / name)
                except OSError as exc:
                    raise OutputError(f"cannot write {str(final / name)!r}: {_describe(exc)}; "
                                      "nothing was left half-written") from None
            os.rename(partial, final)
        except BaseException:
            self._remove_partial(partial, files)
            raise
        self.manifest["partial"] = [p for p in self.manifest["partial"] if p != partial_record]
        self.save()
        return final

    @staticmethod
    def _remove_partial(partial: Path, names) -> None:
        """Remove a temporary folder of ours: only the files we write, then the empty folder."""
        for name in names:
            try:
                (partial / name).unlink()
            except OSError:
                pass
        try:
            partial.rmdir()
        except OSError:
            pass

    def _cleanup_partials(self) -> None:
        """Temporary folders and files a killed run of ours left behind (we hold the lock,
        so no other run is writing them). A temporary file is removed only when the file it
        was to become is in the manifest."""
        for relative in self.manifest.get("partial", []):
            partial = self.path / relative
            if partial.is_dir():
                self._remove_partial(partial, ("ensemble.sdf", "table.csv", "run.json"))
        self.manifest["partial"] = [p for p in self.manifest.get("partial", [])
                                    if (self.path / p).exists()]
        folders = {""} | {f.rstrip("/") for f in self.manifest["files"] if f.endswith("/")}
        for folder in folders:
            try:
                names = [p.name for p in (self.path / folder).iterdir()]
            except OSError:
                continue
            for name in names:
                match = _TEMPORARY.match(name)
                if match is None:
                    continue
                final = match.group(1) + (match.group(3) or "")
                if self.ours(f"{folder}/{final}" if folder else final):
                    try:
                        (self.path / folder / name).unlink()
                    except OSError:
                        pass


def _inside(relative: str) -> bool:
    """True for a relative path that stays inside the folder (manifests are input too)."""
    parts = Path(relative).parts
    return bool(parts) and not Path(relative).is_absolute() and ".." not in parts
