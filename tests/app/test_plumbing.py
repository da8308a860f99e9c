"""The window's small plumbing: the LRU cache behind the image cache, and the one worker shape."""

from __future__ import annotations

import pytest

from app.batch_access import LruCache
from app.workers import Refused, Worker


def test_lru_cache_loads_once_and_drops_the_least_recently_used():
    loads = []

    def load(key):
        loads.append(key)
        return None if key == 0 else key * 10

    cache = LruCache(load, 2)
    assert cache.get(1) == 10 and cache.get(0) is None
    assert cache.get(1) == 10 and cache.get(0) is None  # a None is kept too
    assert loads == [1, 0]
    cache.get(1)           # 1 is now the most recently used
    cache.get(2)           # so 0 goes
    assert 0 not in cache and 1 in cache and 2 in cache and len(cache) == 2
    cache.get(0)
    assert loads == [1, 0, 2, 0]


class _Job(Worker):
    stopped_words = "Job stopped"

    def __init__(self, outcome) -> None:
        super().__init__()
        self.outcome = outcome

    def work(self):
        if isinstance(self.outcome, Exception):
            raise self.outcome
        return self.outcome


@pytest.mark.parametrize("outcome, finished, failed", [
    (42, [42], []),
    (Refused("Not enough digits."), [], ["Not enough digits."]),
    (OSError("disk full"), [], ["Job stopped: disk full"]),
])
def test_a_worker_ends_with_exactly_one_of_finished_or_failed(qtbot, outcome, finished, failed):
    worker = _Job(outcome)
    got_finished, got_failed = [], []
    worker.finished.connect(got_finished.append)
    worker.failed.connect(got_failed.append)
    worker.run()
    assert got_finished == finished
    assert [m.split("\n\n")[0] for m in got_failed] == failed
    if isinstance(outcome, OSError):
        assert "Traceback" in got_failed[0]  # the start of the traceback follows an unexpected error


def test_cancel_is_seen_by_the_worker():
    worker = _Job(None)
    assert not worker.should_stop()
    worker.cancel()
    assert worker.should_stop()
