"""Made-up batches: cards by one distinctive stroke-model writer, read and reviewed to the truth.

For the retraining tests and ``bench/bench_retrain.py``: what an office's batch
looks like after a person checked every field.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from recognizer.batch.store import Batch
from recognizer.ingest import ingest_scans
from recognizer.review import set_field
from recognizer.synth.forms import fnames, orchard_card, random_values, render_form, save_scan
from recognizer.synth.handwriting import Writer

DPI = 200
WRITER_SEED = 11  # a distinctive writer the shipped model reads at about 95 %


def writer_cards(folder: Path, n: int, seed: int) -> tuple[list[Path], dict[tuple[str, str], str]]:
    """``n`` cards by the distinctive writer; returns the files and (file, box-finder field name) -> truth."""
    layout = orchard_card()
    names = fnames(layout)
    rng = np.random.default_rng(seed)
    folder.mkdir(parents=True, exist_ok=True)
    files, truth = [], {}
    for i in range(n):
        form = render_form(layout, random_values(layout, rng=rng), dpi=DPI,
                           writer=Writer.distinctive(WRITER_SEED), rng=rng)
        path = folder / f"card{i:02d}.png"
        save_scan(form.image, path, dpi=DPI)
        files.append(path)
        truth.update({(str(path), names[k]): v for k, v in form.values.items()})
    return files, truth


def reviewed_batch(path: Path, n_cards: int, seed: int, model, *, wrong: bool = False) -> Batch:
    """A batch of ``n_cards`` cards read by ``model`` with every field given its true value.

    ``wrong=True`` gives every digit of the truth shifted by one (1 -> 2, 9 -> 0) instead.
    """
    files, truth = writer_cards(path.with_suffix(""), n_cards, seed)
    batch = Batch.create(path)
    ingest_scans(batch, files, model=model)
    rows = batch.rows("SELECT f.id, f.name, fl.path FROM fields f JOIN pages p ON p.id = f.page_id "
                      "JOIN files fl ON fl.id = p.file_id")
    for r in rows:
        value = truth[(r["path"], r["name"])]
        if wrong:
            value = "".join(str((int(ch) + 1) % 10) for ch in value)
        set_field(batch, r["id"], value, reviewer="tester")
    return batch
