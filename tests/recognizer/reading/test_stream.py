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


def _scan_files(tmp_path, n=3):
    import numpy as np

    from recognizer.synth import forms as fg

    rng = np.random.default_rng(21)
    layout = fg.orchard_card()
    paths = []
    for i in range(n):
        form = fg.render_form(layout, fg.random_values(layout, rng=rng), dpi=200, rng=rng)
        form = fg.scan_distort(form, rng=rng, skew_deg=float(rng.uniform(-2, 2)), noise=0.2)
        paths.append(tmp_path / f"card{i}.png")
        fg.save_scan(form.image, paths[-1], dpi=200)
    return paths


def _readings(results):
    return [(r.source.name, r.skew_deg, [(f.name, f.value, [round(d.confidence, 9) for d in f.digits])
                                         for f in r.fields]) for r in results]


def test_pages_prepared_on_the_decoding_thread_read_as_pages_read_alone(tmp_path):
    """One-process reading works out each page's lighting on the thread that decodes it
    (PageReader.prepare); the readings must be those of each page read on its own."""
    from recognizer.digits.model import load_model
    from recognizer.reading.page import PageReader
    from recognizer.reading.stream import read_scans
    from recognizer.scans.files import iter_pages

    paths = _scan_files(tmp_path)
    model = load_model()
    streamed = list(read_scans(paths, model=model))
    alone = [PageReader(model).read(page) for page in iter_pages(paths)]
    assert len(streamed) == 3 and all(streamed)
    assert _readings(streamed) == _readings(alone)


def test_an_error_while_preparing_leaves_the_page_to_the_reader(tmp_path, monkeypatch):
    """A bug met while preparing a page on the decoding thread must not stop the stream: the
    reader meets it again on that page alone, where it becomes the page's problem line."""
    from recognizer.digits.model import load_model
    from recognizer.reading.page import PageReader
    from recognizer.reading.stream import read_scans
    from recognizer.scans.files import ScanProblem

    paths = _scan_files(tmp_path)
    real = PageReader.prepare

    def prepare(self, page):
        if page.source.name == "card1.png":
            raise RuntimeError("a bug in preparing")
        return real(self, page)

    monkeypatch.setattr(PageReader, "prepare", prepare)
    results = list(read_scans(paths, model=load_model()))
    assert [r.source.name for r in results] == ["card0.png", "card1.png", "card2.png"]
    assert all(not isinstance(r, ScanProblem) and r for r in results)  # card1 prepared again by read
    assert "inkcount-decode" not in _threads()


def test_the_allocator_keeps_page_sized_blocks_where_it_is_glibc():
    """Reading sets glibc's allocator to keep freed page-sized blocks (recognizer.reading.memory);
    elsewhere it changes nothing and says so."""
    import platform
    import sys

    from recognizer.reading.memory import reuse_freed_blocks

    glibc = sys.platform.startswith("linux") and platform.libc_ver()[0] == "glibc"
    assert reuse_freed_blocks() is glibc
    assert reuse_freed_blocks() is glibc  # once per process; asking again changes nothing
