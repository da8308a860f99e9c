"""Registration of generated weigh-in cards to the sample orchard template."""

import dataclasses

import numpy as np
import pytest

from recognizer.synth import forms as fg
from recognizer.page.boxes import find_fields
from recognizer.forms.registration import MIN_SCORE, Registrar, match_templates
from recognizer.forms.drafting import draft_template
from recognizer.forms.template_file import load_template
from tests.support import REPO

TEMPLATE = REPO / "sample_forms" / "orchard_card.json"
LAYOUT = fg.orchard_card()


@pytest.fixture(scope="module")
def registrar() -> Registrar:
    return Registrar(load_template(TEMPLATE))


@pytest.fixture(scope="module")
def reference_centres() -> dict[str, np.ndarray]:
    # the sample template's reference is this blank card (sample_forms/blank_card.png)
    blank = fg.render_form(LAYOUT, {}, dpi=300, rng=np.random.default_rng(0))
    return {name: _centres(b) for name, b in blank.boxes.items()}


def _centres(boxes) -> np.ndarray:
    return np.array([((b[0] + b[2]) / 2, (b[1] + b[3]) / 2) for b in boxes])


def _scan(dpi, rot, scale, shift, seed, **rough):
    rng = np.random.default_rng(seed)
    form = fg.render_form(LAYOUT, fg.random_values(LAYOUT, rng=rng), dpi=dpi, rng=rng)
    return fg.scan_distort(form, rng=rng, skew_deg=rot, scale=scale, shift_mm=shift, noise=0.3,
                           blur=0.8, lighting=0.2, **rough)


def _errors_300(reg, scan, centres, dpi, flipped):
    """Distance (px at 300 dpi) between where the registration puts each box centre and where it is."""
    errors = []
    h, w = scan.image.shape
    for name, ref in centres.items():
        truth = _centres(scan.boxes[name])
        if flipped:
            truth = np.array([w, h]) - truth
        x, y = reg.to_page(ref[:, 0], ref[:, 1])
        errors += list(np.hypot(x - truth[:, 0], y - truth[:, 1]) * 300 / dpi)
    return np.array(errors)


# (dpi, rotation degrees, scale, shift mm, upside down)
CASES = [
    (300, 7.0, 1.0, (5.0, -4.0), False),
    (150, -9.5, 0.92, (0.0, 0.0), False),
    (200, 3.0, 1.08, (-6.0, 3.0), False),
    (400, -2.0, 0.95, (2.0, 2.0), True),
    (600, 0.5, 1.0, (0.0, 0.0), False),
    (300, 10.0, 1.1, (-3.0, 0.0), True),
    (240, -6.0, 0.9, (8.0, 6.0), False),
]


@pytest.mark.parametrize("dpi, rot, scale, shift, flipped", CASES)
def test_generated_pages_register(registrar, reference_centres, dpi, rot, scale, shift, flipped):
    scan = _scan(dpi, rot, scale, shift, seed=dpi + int(rot * 10))
    image = scan.image[::-1, ::-1].copy() if flipped else scan.image
    match = match_templates(image, dpi=dpi, registrars=[registrar])
    assert match, match.problem
    reg = match.registration
    assert reg.upside_down == flipped
    expected_rot = rot + (180 if flipped else 0)
    assert (reg.rotation_deg - expected_rot + 180) % 360 - 180 == pytest.approx(0, abs=0.3)
    assert reg.scale == pytest.approx(scale, abs=0.01)
    errors = _errors_300(reg, scan, reference_centres, dpi, flipped)
    # formgen rounds box walls to whole pixels at each dpi: up to 0.8 px at 300 dpi
    assert np.median(errors) < 1.5 and errors.max() < 3.0
    assert [f.name for f in match.finding.fields] == [f.name for f in registrar.template.fields]
    assert reg.score > 0.8 and reg.layer == "lines"  # black boxes: scored on the lines, walls included


def test_faint_broken_and_cut_off_pages_register(registrar):
    faint = _scan(200, 2.0, 1.0, (0, 0), seed=5, faint_lines=0.6, broken_lines=0.1)
    assert registrar.register(faint.image, dpi=200).score > 0.7
    whole = _scan(200, 1.0, 1.0, (0, 0), seed=6)
    half = whole.image[:, : whole.image.shape[1] // 2]
    match = match_templates(half, dpi=200, registrars=[registrar])
    assert match, match.problem
    outside = {f.name for f in match.finding.fields if f.doubts}
    assert {"picking_date", "crates_3"} <= outside and "grower_number" not in outside


def _other_designs():
    moved = dataclasses.replace(LAYOUT, name="moved", fields=tuple(
        dataclasses.replace(f, x_mm=f.x_mm + 5, y_mm=f.y_mm + 8) for f in LAYOUT.fields))
    return [fg.bench_page(), moved]


@pytest.mark.parametrize("layout", _other_designs(), ids=lambda l: l.name)
def test_other_designs_do_not_match(registrar, layout):
    rng = np.random.default_rng(11)
    form = fg.render_form(layout, fg.random_values(layout, rng=rng), dpi=200, rng=rng)
    match = match_templates(form.image, dpi=200, registrars=[registrar])
    assert not match and "does not match" in match.problem
    # real cards score above 0.8 (test above): the scores separate the two
    assert match.registration.score < MIN_SCORE - 0.15


def test_each_page_goes_to_the_template_it_fits(registrar):
    bench = fg.bench_page()
    blank = fg.render_form(bench, {}, dpi=200, rng=np.random.default_rng(1))
    bench_template = draft_template(find_fields(blank.image, dpi=200), name="tally")
    registrars = [registrar, Registrar(bench_template)]
    rng = np.random.default_rng(12)
    bench_page = fg.render_form(bench, fg.random_values(bench, rng=rng), dpi=300, rng=rng).image
    card = _scan(300, -4.0, 1.0, (0, 0), seed=13).image
    assert match_templates(card, dpi=300, registrars=registrars).template.name == "orchard_card"
    m = match_templates(bench_page, dpi=300, registrars=registrars)
    assert m.template.name == "tally" and set(m.scores) == {"orchard_card v1", "tally v1"}
    blank_page = np.full((1200, 900), 255, np.uint8)
    none = match_templates(blank_page, dpi=150, registrars=registrars)
    assert not none and none.template is None


def test_a_phone_photo_of_a_card_smaller_than_a4_registers_and_reads(registrar, tmp_path):
    # The weigh-in card has the shape of A4 paper but not its size: a flattened photo of it gets the
    # dpi of an A4 page (the paper sizes A4 and A5 cannot be told apart by shape), about 1.4 times
    # too low. With the dpi known to be a guess the template's own size decides the scale.
    from recognizer.reading.page import PageReader
    from recognizer.scans.files import iter_pages

    rng = np.random.default_rng(21)
    values = fg.random_values(LAYOUT, rng=rng)
    form = fg.render_form(LAYOUT, values, dpi=300, rng=rng, colour=True)
    photo = fg.phone_photo(form, rng=rng, tilt_deg=6.0, roll_deg=3.0)
    path = tmp_path / "card_photo.jpg"
    photo.save(path)
    page = next(iter(iter_pages([path])))
    assert page.dpi_origin == "photo"
    # the paper taken for A4 whatever the photo's guess was: the dpi 1/sqrt(2) of the card's own
    true_dpi = max(page.image.shape) / (max(LAYOUT.page_mm) / 25.4)
    page = dataclasses.replace(page, dpi=true_dpi / 2 ** 0.5)
    assert not registrar.register(page.image, dpi=page.dpi)  # taken as known, the scale is implausible
    reg = registrar.register(page.image, dpi=page.dpi, dpi_known=False)
    assert reg and reg.score > 0.8 and not 0.85 <= reg.scale <= 1.15
    from recognizer.digits.model import load_model

    read = PageReader(load_model(), templates=[registrar.template]).read(page)
    assert read and read.template == "orchard_card v1"
    by_name = {f.name: f.value for f in read.fields}
    assert set(by_name) == {f.name for f in registrar.template.fields}
    right = sum(by_name[n] == v for n, v in values.items() if n in by_name)
    assert right >= len(values) - 2  # the handwriting is the generator's; misreads are flagged elsewhere
