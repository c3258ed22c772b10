"""The digest computed beside the insert: another process's answer, or this one's, always the same value."""

import os
import time

import pytest

from sumpwise.ledger.aside import Aside, two_processes_possible

forks = pytest.mark.skipif(not two_processes_possible(), reason="fork is used on Linux only, without threads")


@forks
def test_the_value_comes_from_another_process():
    here = os.getpid()
    with Aside(lambda: str(os.getpid())) as aside:
        assert aside.result() != str(here)


@forks
def test_a_failure_in_the_other_process_is_computed_here():
    here = os.getpid()

    def compute():
        if os.getpid() != here:
            raise MemoryError("the other process ran out")
        return "computed here"

    with Aside(compute) as aside:
        assert aside.result() == "computed here"


@forks
def test_an_answer_too_long_for_one_pipe_write_is_computed_here():
    with Aside(lambda: "x" * 5000) as aside:
        assert aside.result() == "x" * 5000


@forks
def test_an_unwanted_answer_ends_the_other_process():
    aside = Aside(lambda: time.sleep(60) or "late")
    pid = aside.pid
    started = time.monotonic()
    aside.close()
    assert time.monotonic() - started < 10
    with pytest.raises(ChildProcessError):
        os.waitpid(pid, os.WNOHANG)  # reaped: no zombie left behind


def test_without_fork_the_value_is_computed_here(monkeypatch):
    import sumpwise.ledger.aside as aside_module
    monkeypatch.setattr(aside_module, "two_processes_possible", lambda: False)
    aside = Aside(lambda: str(os.getpid()))
    assert aside.pid is None and aside.result() == str(os.getpid())
