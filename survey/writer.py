"""Who writes a run, and whether that process is still alive (stdlib only: cheap to import).

A run's ``settings`` JSON holds its writer (``{"pid", "host"}``); a ``running`` run whose writer
ran on this host and is gone is shown as ``interrupted`` (:func:`shown_status`), and the next
writer marks it so (:func:`survey.session.mark_interrupted_runs`).
"""

from __future__ import annotations

import os
import socket

#: Key of the writer's identity in a run's ``settings`` JSON.
WRITER_KEY = "writer"
#: Status shown for a run left ``running`` by a process that is gone.
INTERRUPTED = "interrupted"


def writer_identity() -> dict:
    """This process as a run's writer: ``{"pid": int, "host": str}``."""
    return {"pid": os.getpid(), "host": socket.gethostname()}


def process_alive(pid: int) -> bool:
    """Whether a process with id ``pid`` exists on this host (``kill(pid, 0)``, POSIX)."""
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    except OSError:
        return False
    return True


def writer_gone(settings: object) -> bool:
    """True when a run's recorded writer ran on this host and its process no longer exists.

    Unknown (no writer recorded, another host) counts as not gone: a run is never marked
    interrupted on a guess.
    """
    if not isinstance(settings, dict):
        return False
    writer = settings.get(WRITER_KEY)
    if not isinstance(writer, dict):
        return False
    pid, host = writer.get("pid"), writer.get("host")
    if not isinstance(pid, int) or isinstance(pid, bool) or host != socket.gethostname():
        return False
    return pid != os.getpid() and not process_alive(pid)


def shown_status(run: dict) -> str:
    """The status to show for a run of :func:`survey.store.list_runs`: ``interrupted`` for a
    ``running`` run whose writer is gone, else the stored status."""
    if run.get("status") == "running" and writer_gone(run.get("settings")):
        return INTERRUPTED
    return str(run.get("status"))
