"""Streaming pages through the reader: decoding ahead in a thread, stopping early, errors."""

from __future__ import annotations

import threading

import pytest

from recognizer.reading.stream import _decoded_ahead


def _threads() -> set[str]:
    return {t.name for t in threading.enumerate()}


def test_decoded_ahead_keeps_order_and_holds_few_items():
    made = []

    def pages():
        for i in range(20):
            made.append(i)
            yield i

    seen = []
    for item in _decoded_ahead(pages(), depth=1):
        seen.append(item)
        assert len(made) - len(seen) <= 2  # one in the queue, one being made
    assert seen == list(range(20))
    assert "inkcount-decode" not in _threads()


def test_stopping_early_ends_the_decoding_thread():
    closed = threading.Event()

    def pages():
        try:
            for i in range(1000):
                yield i
        finally:
            closed.set()

    stream = _decoded_ahead(pages())
    assert next(stream) == 0
    stream.close()
    assert closed.is_set()
    assert "inkcount-decode" not in _threads()


def test_an_error_while_decoding_reaches_the_caller():
    def pages():
        yield 1
        raise OSError("disk went away")

    stream = _decoded_ahead(pages())
    assert next(stream) == 1
    with pytest.raises(OSError, match="disk went away"):
        next(stream)
