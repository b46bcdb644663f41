"""The cyclic garbage collector's pause (archivist.collector), against CPython's own switch (gc.isenabled)."""

from __future__ import annotations

import gc
import threading

import pytest

from archivist.collector import collector_paused


@pytest.fixture(autouse=True)
def collector_restored():
    was = gc.isenabled()
    yield
    (gc.enable if was else gc.disable)()


def test_paused_inside_and_running_again_after():
    gc.enable()
    with collector_paused():
        assert not gc.isenabled()
    assert gc.isenabled()


def test_nested_pauses_resume_when_the_outer_one_ends():
    gc.enable()
    with collector_paused():
        with collector_paused():
            assert not gc.isenabled()
        assert not gc.isenabled()  # the outer pause still holds
    assert gc.isenabled()


def test_a_caller_that_switched_it_off_keeps_it_off():
    gc.disable()
    with collector_paused():
        assert not gc.isenabled()
    assert not gc.isenabled()


def test_resumes_after_an_error():
    gc.enable()
    with pytest.raises(ValueError):
        with collector_paused():
            raise ValueError("stop")
    assert gc.isenabled()


def test_as_a_decorator_each_call_pauses_again():
    gc.enable()
    seen = []

    @collector_paused()
    def work():
        seen.append(gc.isenabled())

    work()
    work()
    assert seen == [False, False]
    assert gc.isenabled()


def test_overlapping_pauses_in_two_threads_resume_after_the_last():
    gc.enable()
    first_in, second_in, first_out = threading.Event(), threading.Event(), threading.Event()
    states = {}

    def first():
        with collector_paused():
            first_in.set()
            second_in.wait(5)
        first_out.set()

    def second():
        first_in.wait(5)
        with collector_paused():
            second_in.set()
            first_out.wait(5)
            states["while the second still works"] = gc.isenabled()

    threads = [threading.Thread(target=first), threading.Thread(target=second)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(10)
    assert states == {"while the second still works": False}
    assert gc.isenabled()


def test_check_and_load_leave_the_collector_as_they_found_it():
    from archivist import check, load_project
    from builders import BUNDLE

    gc.enable()
    project = load_project(BUNDLE)
    assert gc.isenabled()
    check(project)
    assert gc.isenabled()
    gc.disable()
    check(project)
    assert not gc.isenabled()
