"""Worker processes that end when the batch that started them dies.

A worker of a process pool waits for its next task on a pipe. When the batch process is killed
outright (``kill -9``, the out-of-memory killer), nothing closes that pipe for the worker (under the
``fork`` start method every worker holds both of its ends), so the worker would wait for ever, an
orphan holding memory and open files. :func:`start` runs in each worker as the pool's initializer:
a daemon thread checks twice a second that the batch process is still its parent and ends the worker
at once (``os._exit``) when it is not. Polling the parent id is portable (no ``prctl``) and does not
depend on which thread of the batch started the worker.
"""

from __future__ import annotations

import logging
import os
import threading
import time

log = logging.getLogger(__name__)

POLL_S = 0.5
"""How often a worker checks that its batch is still alive (seconds)."""
ORPHAN_EXIT_CODE = 70
"""Exit status of a worker that outlived its batch (EX_SOFTWARE: not a normal end)."""


def start(batch_pid: int, quiet: bool = False) -> None:
    """Pool initializer: end this worker when the process ``batch_pid`` is gone.

    ``quiet`` (de-identifying) silences the loggers that could name a study or file.
    """
    if quiet:
        from reporting.batch.redact import silence_input_logs

        silence_input_logs()
    parent = os.getppid()
    thread = threading.Thread(
        target=_watch, args=(batch_pid, parent), name="segreport-watchdog", daemon=True
    )
    thread.start()


def _watch(batch_pid: int, parent: int) -> None:
    while True:
        time.sleep(POLL_S)
        if os.getppid() != parent or not alive(batch_pid):
            # The batch is gone: nobody will read our results. Leave at once, without running
            # cleanup that could block on the pool's pipes.
            os._exit(ORPHAN_EXIT_CODE)


def alive(pid: int) -> bool:
    """True when a process ``pid`` exists (it may belong to another user)."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True
