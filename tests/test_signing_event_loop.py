"""Signing and validating work where an asyncio loop is already running (a Jupyter kernel)."""

from __future__ import annotations

import asyncio

from studykit.report.signing import outside_event_loop


def test_outside_event_loop_calls_directly_without_a_loop():
    assert outside_event_loop(lambda a, b=0: a + b, 2, b=3) == 5


def test_outside_event_loop_runs_asyncio_run_inside_a_running_loop():
    async def inner():
        return 7

    def uses_asyncio_run():
        return asyncio.run(inner())

    async def main():
        # as in a Jupyter kernel: a loop runs in this thread, so asyncio.run would fail here
        return outside_event_loop(uses_asyncio_run)

    # run the scenario in a thread of its own, so a loop left by other tests does not matter
    from concurrent.futures import ThreadPoolExecutor

    with ThreadPoolExecutor(max_workers=1) as pool:
        assert pool.submit(lambda: asyncio.run(main())).result() == 7
