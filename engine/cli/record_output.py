"""Where `grade` writes its records: in this process, or with a second one while the next chunk is graded.

Rendering JSON Lines costs about twice what reading and grading the same rows does, and the
machine has a second core. So when records go out as UTF-8 JSON Lines to a file or a pipe
on Linux, each graded chunk is handed to a forked process that renders and writes its
blocks from the front, in order, while this process reads and grades the next chunk; this
process then renders the blocks the other has not yet taken, from the back, waits for it to
finish, and writes them after. Each block is taken once, under a lock (one byte in a pipe)
over two counters in shared memory, so the records come out in input order and are the
same bytes one process writes (tests compare). Memory: two graded chunks at most, plus this
process's share of rendered text (at most HELD_ROWS rows). A failure in the other process
(a closed pipe, a full disk, a bug) is raised here as the same kind of error.
"""

from __future__ import annotations

import gc
import mmap
import os
import select
import signal
import struct
import traceback

from sumpwise.ledger.aside import two_processes_possible
from sumpwise.render.csv_rows import write_csv
from sumpwise.render.jsonl import block_renderer, write_jsonl, write_jsonl_bytes
from sumpwise.render.table import write_table

BLOCK_ROWS = 25_000  # rows rendered at a time when two processes share a chunk (a few % dearer than 100,000)
HELD_ROWS = 100_000  # rows of rendered text this process holds while the other writes: about 220 MB of full records
_BROKEN_PIPE, _OS_ERROR, _FAILED = 3, 4, 5  # exit statuses of the other process, read back here
_MESSAGE_BYTES = 4000  # under a pipe's atomic write: the other process never blocks writing why it failed


def default_jobs() -> int:
    """Two when the process may run on two cores."""
    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)
    return 2 if cores >= 2 else 1


class RecordOutput:
    """Writes graded batches in the chosen format; with two processes when `jobs` is 2 and the
    records are UTF-8 JSON Lines on a binary stream (`binary`)."""

    def __init__(self, out, binary, fmt: str, form: str, progress, jobs: int = 1):
        self.out, self.binary, self.fmt, self.form, self.progress = out, binary, fmt, form, progress
        self.shared = jobs >= 2 and fmt == "jsonl" and binary is not None and two_processes_possible()
        self.pending: _Handed | None = None

    def write(self, graded, header: bool) -> None:
        """Write one graded batch (a whole file or a chunk), after every batch written before it."""
        if not self.shared:
            self._write_here(graded, header)
            return
        self.settle()
        self.out.flush()  # what the text layer holds goes first, and is not copied into the other process
        self.binary.flush()
        try:
            self.pending = _Handed(graded, self.binary, self.form)
        except OSError:  # fork refused (no memory or process slots): one process does it all
            self._write_here(graded, header)

    def settle(self) -> None:
        """Finish the batch in hand: every record written before this returns."""
        pending, self.pending = self.pending, None
        if pending is not None:
            pending.finish()

    def abandon(self) -> None:
        pending, self.pending = self.pending, None
        if pending is not None:
            pending.stop()

    def __enter__(self):
        return self

    def __exit__(self, kind, exc, tb):
        if kind is None:
            self.settle()
        elif issubclass(kind, Exception) and not issubclass(kind, BrokenPipeError):
            try:  # a later chunk failed: the chunks before it are written, as one process would have
                self.settle()
            except Exception:
                self.abandon()
        else:  # interrupted, or nobody reads any more
            self.abandon()
        return False

    def _write_here(self, graded, header: bool) -> None:
        if self.fmt == "jsonl" and self.binary is not None:
            self.out.flush()  # what the text layer holds goes first
            write_jsonl_bytes(graded, self.binary, self.form)
        elif self.fmt == "jsonl":
            write_jsonl(graded, self.out, self.form)
        elif self.fmt == "csv":
            write_csv(graded, self.out, header=header)
        else:
            write_table(graded, self.out, progress=self.progress)


class _Shares:
    """Block numbers 0..n-1, each handed out once: from the front to the forked process, from the
    back to this one. The lock is one byte in a pipe; the counters live in shared anonymous memory."""

    def __init__(self, blocks: int):
        self.memory = mmap.mmap(-1, 16)  # MAP_SHARED: the forked process sees the same two counters
        struct.pack_into("qq", self.memory, 0, 0, blocks)
        self.lock_out, self.lock_in = os.pipe()
        os.set_blocking(self.lock_out, False)
        os.write(self.lock_in, b"\0")
        self.ready = select.poll()  # poll, not select: any descriptor number will do
        self.ready.register(self.lock_out, select.POLLIN)

    def take(self, front: bool, other_ended) -> int | None:
        """The next block from the front or the back; None when none is left. `other_ended()`
        says whether the other process is gone: a lock it died holding is never waited for."""
        while True:
            if self.ready.poll(500):
                try:
                    os.read(self.lock_out, 1)  # non-blocking: the other may have taken the byte first
                    break
                except BlockingIOError:
                    continue
            if other_ended():
                return self._taken(front)
        try:
            return self._taken(front)
        finally:
            os.write(self.lock_in, b"\0")

    def _taken(self, front: bool) -> int | None:
        first, end = struct.unpack_from("qq", self.memory)
        if first >= end:
            return None
        if front:
            taken, first = first, first + 1
        else:
            end -= 1
            taken = end
        struct.pack_into("qq", self.memory, 0, first, end)
        return taken

    def close(self) -> None:
        os.close(self.lock_out)
        os.close(self.lock_in)
        self.memory.close()


class _Child:
    """The forked process: its id, how it ended, and what it said on failing."""

    def __init__(self, pid: int, said: int):
        self.pid, self.said, self.status = pid, said, None

    def ended(self) -> bool:
        if self.status is None:
            pid, status = os.waitpid(self.pid, os.WNOHANG)
            if pid:
                self.status = status
        return self.status is not None

    def wait(self) -> int:
        if self.status is None:
            self.status = os.waitpid(self.pid, 0)[1]
        return self.status

    def raise_failure(self) -> None:
        """Raise what the other process met, as the error class the command line reports."""
        status = self.wait()
        message = os.read(self.said, _MESSAGE_BYTES * 2).decode("utf-8", "replace")
        os.close(self.said)
        if os.WIFSIGNALED(status):
            raise RuntimeError(f"the process writing records was ended by signal {os.WTERMSIG(status)}")
        code = os.WEXITSTATUS(status)
        if code == 0:
            return
        if code == _BROKEN_PIPE:
            raise BrokenPipeError(message)
        if code == _OS_ERROR:
            raise OSError(message)
        raise RuntimeError(f"the process writing records failed: {message}")


class _Handed:
    """One graded batch being written by two processes."""

    def __init__(self, graded, binary, form: str):
        self.graded, self.binary, self.form = graded, binary, form
        n = len(graded)
        self.shares = _Shares(-(-n // BLOCK_ROWS))
        said_out, said_in = os.pipe()
        gc.freeze()  # the collector then leaves the objects both processes share untouched (no copied pages)
        try:
            pid = os.fork()
        except OSError:  # no process to be had: the caller writes the batch itself
            gc.unfreeze()
            for end in (said_out, said_in):
                os.close(end)
            self.shares.close()
            raise
        if pid == 0:
            os.close(said_out)
            _render_front(graded, binary, form, self.shares, said_in)  # never returns
        gc.unfreeze()
        os.close(said_in)
        self.child = _Child(pid, said_out)

    def finish(self) -> None:
        """Render blocks from the back while the other renders from the front, then write them after its own."""
        held, rows = [], 0
        render = None
        try:
            while rows < HELD_ROWS:
                block = self.shares.take(False, self.child.ended)
                if block is None:
                    break
                render = render or block_renderer(self.graded, self.form)
                start, stop = _rows(block, len(self.graded))
                held.append(render(start, stop))
                rows += stop - start
            self.child.raise_failure()
        finally:
            self.shares.close()
        for pieces in reversed(held):
            for piece in pieces:
                self.binary.write(piece)

    def stop(self) -> None:
        """End the other process and its share: after an interrupt or a closed pipe nothing more is written."""
        try:
            os.kill(self.child.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
        self.child.wait()
        os.close(self.child.said)
        self.shares.close()


def _rows(block: int, n: int) -> tuple[int, int]:
    """The rows (start, stop) of block number `block` of a batch of n rows."""
    return block * BLOCK_ROWS, min(n, (block + 1) * BLOCK_ROWS)


def _render_front(graded, binary, form: str, shares: _Shares, said: int) -> None:
    """The forked process: render and write blocks from the front, in order, then leave at once
    (os._exit: none of the parent's clean-up, buffers or exit handlers run twice)."""
    code, parent = 0, os.getppid()
    try:
        render = block_renderer(graded, form)
        while (block := shares.take(True, lambda: os.getppid() != parent)) is not None:
            for piece in render(*_rows(block, len(graded))):
                binary.write(piece)
        binary.flush()
    except BrokenPipeError:
        code = _BROKEN_PIPE
    except OSError as exc:
        code = _OS_ERROR
        os.write(said, str(exc.strerror or exc).encode("utf-8", "replace")[:_MESSAGE_BYTES])
    except BaseException as exc:  # noqa: BLE001 - any failure is reported to the parent, which decides
        code = _FAILED
        text = f"{exc!r}\n{traceback.format_exc()}"
        os.write(said, text.encode("utf-8", "replace")[-_MESSAGE_BYTES:])
    finally:
        os._exit(code)
