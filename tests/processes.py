"""Process checks shared by the tests of interrupted and terminated runs (reads /proc)."""

from __future__ import annotations

import os


def alive(pid: int) -> bool:
    """Whether process ``pid`` exists and has not ended (a zombie has ended)."""
    try:
        with open(f"/proc/{pid}/stat") as handle:
            return handle.read().split(")")[-1].split()[0] != "Z"
    except OSError:
        return False


def session_processes(sid: int) -> list[int]:
    """The live processes of session ``sid`` (a command started with start_new_session)."""
    found = []
    for entry in os.listdir("/proc"):
        if entry.isdigit():
            try:
                if os.getsid(int(entry)) == sid and alive(int(entry)):
                    found.append(int(entry))
            except OSError:
                pass
    return found
