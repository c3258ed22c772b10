"""A pure computation run by a forked process while this one goes on (the machine has two cores).

Recording a batch spends about as long storing its rows in SQLite as hashing them for the
batch's digest, and neither needs the other's result: the digest is taken from the rows as
written. So the digest is computed beside the insert. The other process only reads what it
inherited and writes its short answer to a pipe; it never touches the SQLite connection
(a connection must not be used across fork). Where fork is unsafe or refused, or the other
process fails, the value is computed here instead: the same function, the same value.
"""

from __future__ import annotations

import gc
import os
import signal
import sys
import threading

ANSWER_BYTES = 4096  # at most PIPE_BUF: written in one piece, never blocking the other process


def two_processes_possible() -> bool:
    """Fork is safe only without other threads; only Linux is relied on (macOS frameworks refuse fork)."""
    return sys.platform.startswith("linux") and hasattr(os, "fork") and threading.active_count() == 1


class Aside:
    """`compute()` (returning short text) run by a forked process; `result()` waits for it."""

    def __init__(self, compute):
        self.compute, self.pid, self.answer = compute, None, None
        if not two_processes_possible():
            return
        answer, said = os.pipe()
        gc.freeze()  # the collector then leaves the shared objects untouched (fewer copied pages)
        try:
            pid = os.fork()
        except OSError:  # no process to be had: computed here when asked
            gc.unfreeze()
            os.close(answer)
            os.close(said)
            return
        if pid == 0:
            code = 1
            try:
                os.close(answer)
                text = compute().encode("utf-8")
                if len(text) <= ANSWER_BYTES:
                    os.write(said, text)
                    code = 0
            except BaseException:  # noqa: BLE001 - any failure: the parent computes the value itself
                pass
            finally:
                os._exit(code)  # none of the parent's clean-up, buffers or exit handlers run twice
        gc.unfreeze()
        os.close(said)
        self.pid, self.answer = pid, answer

    def result(self) -> str:
        if self.pid is None:
            return self.compute()
        try:
            text = os.read(self.answer, ANSWER_BYTES + 1)  # until the other writes or ends
            status = os.waitpid(self.pid, 0)[1]
        finally:
            self._forget()
        if os.WIFEXITED(status) and os.WEXITSTATUS(status) == 0 and text:
            return text.decode("utf-8")
        return self.compute()

    def close(self) -> None:
        """Stop the other process when its answer is no longer wanted (a failed recording)."""
        if self.pid is None:
            return
        try:
            os.kill(self.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
        os.waitpid(self.pid, 0)
        self._forget()

    def _forget(self) -> None:
        os.close(self.answer)
        self.pid = self.answer = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False
