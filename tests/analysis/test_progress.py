"""The stage reporter (server/analysis/progress.py; issue 14): silent when nobody listens, throttled, one per context.

Times are a fake clock's: nothing here is timed (the cost of a silent ``stage`` call is measured outside the tests).
"""
from __future__ import annotations

import asyncio
import contextvars
import threading

from server.analysis import progress
from server.analysis.progress import Reporter, reporting, stage, tag


class Clock:
    def __init__(self) -> None:
        self.now = 100.0

    def __call__(self) -> float:
        return self.now


def reporter(delay=0.4, interval=0.25, **fields):
    sent: list[dict] = []
    clock = Clock()
    return Reporter(sent.append, delay=delay, interval=interval, clock=clock, **fields), sent, clock


def test_nobody_listens_by_default_and_stage_does_nothing():
    assert progress.current() is None
    stage("correlations of 250 items")  # no reporter: nothing to record, nothing raised
    stage("parallel analysis", 3, 10)
    tag(key="anything")
    assert progress.current() is None


def test_stage_reaches_the_installed_reporter_and_only_inside_the_block():
    r, sent, clock = reporter(delay=0.0, interval=0.0)
    with reporting(r) as got:
        assert got is r and progress.current() is r
        stage("correlations of 250 items")
        tag(key="k1")
        clock.now += 0.1
        stage("parallel analysis", 120, 500)
    stage("after the block")  # not reported: the reporter is gone
    assert progress.current() is None
    assert [m["stage"] for m in sent] == ["correlations of 250 items", "parallel analysis"]
    assert sent[1] == {"stage": "parallel analysis", "done": 120, "total": 500, "elapsed_s": 0.1, "key": "k1"}


def test_a_quick_piece_of_work_sends_nothing_not_even_done():
    r, sent, clock = reporter()
    with reporting(r):
        stage("reliability of 60 items (alpha, omega)")
        clock.now += 0.1
        stage("pruning path")
        clock.now += 0.2  # 0.3 s in all: under the 0.4 s delay
        assert r.flush() is False
    assert r.finish() is False
    assert sent == []


def test_throttled_after_the_delay_at_most_one_message_per_interval():
    r, sent, clock = reporter(delay=0.4, interval=0.25)
    stage_at = [(0.0, "a"), (0.3, "b"), (0.45, "c"), (0.5, "d"), (0.6, "e"), (0.71, "f"), (0.8, "g")]
    with reporting(r):
        for t, name in stage_at:
            clock.now = 100.0 + t
            stage(name)
    # c is the first past the delay; d and e fall within 0.25 s of it; f is 0.26 s after c; g within f's interval
    assert [(m["stage"], m["elapsed_s"]) for m in sent] == [("c", 0.45), ("f", 0.71)]
    clock.now = 100.9  # within f's interval: g waits
    assert r.flush() is False
    clock.now = 100.97  # the timer's flush sends the stage that was left waiting, once
    assert r.flush() is True and sent[-1]["stage"] == "g"
    clock.now = 101.5
    assert r.flush() is False  # unchanged since it was sent: nothing new to say
    clock.now = 102.0
    assert r.finish() is True
    assert sent[-1] == {"stage": "done", "done": None, "total": None, "elapsed_s": 2.0, "final": True}
    assert r.finish() is False and r.flush() is False  # finished: silent from now on
    stage_count = len(sent)
    with reporting(r):
        stage("late")
    assert len(sent) == stage_count


def test_a_long_wait_is_reported_by_the_timer_flush():
    """A stage that lasts (waiting for a slot) has no further stage calls: the caller's timer flushes it."""
    r, sent, clock = reporter()
    with reporting(r):
        stage("waiting: other analyses are using every core")
        for _ in range(3):  # the timer, while the worker is blocked
            clock.now += 0.3
            r.flush()
    assert [m["stage"] for m in sent] == ["waiting: other analyses are using every core"]
    assert sent[0]["elapsed_s"] == 0.6


def test_a_stage_that_lasts_is_repeated_now_and_then_for_late_listeners():
    r, sent, clock = reporter(delay=0.4, interval=0.25, repeat=1.0)
    with reporting(r):
        stage("parallel analysis of 250 items against random data")
        for t in (0.5, 1.0, 1.4, 1.6, 2.0, 2.7):  # the timer's ticks
            clock.now = 100.0 + t
            r.flush()
    assert [m["elapsed_s"] for m in sent] == [0.5, 1.6, 2.7]
    assert {m["stage"] for m in sent} == {"parallel analysis of 250 items against random data"}


def test_nested_blocks_restore_the_outer_reporter():
    outer, outer_sent, _ = reporter(delay=0.0, interval=0.0)
    inner, inner_sent, _ = reporter(delay=0.0, interval=0.0)
    with reporting(outer):
        stage("outer 1")
        with reporting(inner):
            stage("inner")
            with reporting(None):  # a part nobody should hear about
                stage("silent")
            stage("inner again")
        stage("outer 2")
    assert [m["stage"] for m in outer_sent] == ["outer 1", "outer 2"]
    assert [m["stage"] for m in inner_sent] == ["inner", "inner again"]


def test_concurrent_threads_each_report_to_their_own_reporter():
    """Two requests at once: each worker runs in its own copied context and hears only its own stages."""
    reporters = [reporter(delay=0.0, interval=0.0) for _ in range(2)]
    barrier = threading.Barrier(2)

    def work(i: int) -> None:
        with reporting(reporters[i][0]):
            for step in range(50):
                stage(f"request {i} step {step}")
                if step == 0:
                    barrier.wait(5)  # both are inside their blocks at once

    threads = [threading.Thread(target=contextvars.copy_context().run, args=(work, i)) for i in range(2)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(10)
    for i, (_, sent, _) in enumerate(reporters):
        assert [m["stage"] for m in sent] == [f"request {i} step {s}" for s in range(50)]
    assert progress.current() is None


def test_a_thread_started_inside_a_block_does_not_inherit_the_reporter():
    """The engine's background work (warm-up, threshold prefetch) runs in plain threads: it reports nothing."""
    r, sent, _ = reporter(delay=0.0, interval=0.0)
    seen = []
    with reporting(r):
        t = threading.Thread(target=lambda: (seen.append(progress.current()), stage("background")))
        t.start()
        t.join(5)
    assert seen == [None] and sent == []


def test_concurrent_async_tasks_are_kept_apart():
    async def one(i: int, r: Reporter) -> None:
        with reporting(r):
            for step in range(3):
                stage(f"task {i} step {step}")
                await asyncio.sleep(0)  # the other task runs between the steps

    async def both(rs):
        await asyncio.gather(*(one(i, r) for i, r in enumerate(rs)))

    reps = [reporter(delay=0.0, interval=0.0) for _ in range(2)]
    asyncio.run(both([r for r, _, _ in reps]))
    for i, (_, sent, _) in enumerate(reps):
        assert [m["stage"] for m in sent] == [f"task {i} step {s}" for s in range(3)]


def test_key_digest_is_short_and_stable():
    d = progress.key_digest('{"items": ["q1", "q2"]}')
    assert len(d) == 16 and d == progress.key_digest('{"items": ["q1", "q2"]}')
    assert d != progress.key_digest('{"items": ["q1"]}')
