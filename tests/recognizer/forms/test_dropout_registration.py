"""Registering and reading black-and-white pages of a form whose boxes are printed in a dropout colour.

A 1-bit (fax-like) scan of the weighbridge ticket keeps its black title, emblem, corner marks and
footer and the handwriting, and loses its red boxes. Its template, drafted from a colour scan of the
blank form, registers such pages on the dark print outside the fields
(:mod:`recognizer.forms.registration`, step 4) and reads them at the template's boxes.

All forms and handwriting here are generated (invented Larkhollow Orchard Cooperative forms, our own
stroke-model writers): the geometry is checked against the truth the generator knows, the reading
of a black-and-white page against the grey flatbed scan of the same filled-in form.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest

from recognizer.digits.model import load_model
from recognizer.forms.drafting import draft_from_scan, draft_template
from recognizer.forms.registration import MIN_SCORE, Registrar, match_templates
from recognizer.page.boxes import find_fields
from recognizer.reading.page import BOXES_NOT_VISIBLE, SOME_BOXES_NOT_VISIBLE, PageReader
from recognizer.scans.files import Page, iter_pages
from recognizer.synth import forms as fg

TICKET = fg.weigh_ticket()


def _blank(layout: fg.FormLayout) -> fg.RenderedForm:
    return fg.render_form(layout, {}, dpi=300, rng=np.random.default_rng(0), colour=True)


@pytest.fixture(scope="module")
def template(tmp_path_factory):
    """The ticket's template as ``inkcount template new`` drafts it from a colour scan of the blank form."""
    scan = tmp_path_factory.mktemp("blank") / "weigh_ticket_blank.png"
    fg.save_scan(_blank(TICKET).rgb, scan, dpi=300, optimize=False)
    draft = draft_from_scan(scan, name="weigh_ticket", field_names=[f.name for f in TICKET.fields])
    assert draft, draft.problem
    return draft.template


@pytest.fixture(scope="module")
def registrar(template) -> Registrar:
    return Registrar(template)


@pytest.fixture(scope="module")
def reference_centres() -> dict[str, np.ndarray]:
    return {name: _centres(boxes) for name, boxes in _blank(TICKET).boxes.items()}


def _centres(boxes) -> np.ndarray:
    return np.array([((b[0] + b[2]) / 2, (b[1] + b[3]) / 2) for b in boxes])


def _filled(layout: fg.FormLayout, seed: int, *, rot: float = 1.0, scale: float = 1.0,
            shift: tuple[float, float] = (0.0, 0.0)) -> fg.RenderedForm:
    """A filled-in form as a flatbed scanner sees it (grey, 300 dpi)."""
    rng = np.random.default_rng(seed)
    form = fg.render_form(layout, fg.random_values(layout, rng=rng), dpi=300, rng=rng)
    return fg.scan_distort(form, rng=rng, skew_deg=rot, scale=scale, shift_mm=shift, noise=0.3, blur=0.5,
                           lighting=0.2)


def _bitonal(scan: fg.RenderedForm, seed: int, threshold: int = 140) -> fg.RenderedForm:
    return fg.bitonal_scan(scan, rng=np.random.default_rng(seed), dpi=200, threshold=threshold)


# (rotation degrees, scale, shift mm, upside down, the bitonal scanner's threshold: 140 drops the red
# print, 165 keeps specks and dashes of it)
CASES = [
    (1.5, 1.0, (0.0, 0.0), False, 140),
    (-4.0, 0.96, (3.0, -2.0), False, 140),
    (2.5, 1.03, (-2.0, 4.0), True, 140),
    (-1.0, 1.0, (1.0, 1.0), False, 165),
]


@pytest.mark.parametrize("rot, scale, shift, flipped, threshold", CASES)
def test_black_and_white_pages_register_on_the_dark_print(registrar, reference_centres, rot, scale, shift,
                                                          flipped, threshold):
    scan = _bitonal(_filled(TICKET, 31, rot=rot, scale=scale, shift=shift), 31, threshold)
    image = scan.image[::-1, ::-1].copy() if flipped else scan.image
    reg = registrar.register(image, dpi=200)
    assert reg, reg.problem
    assert reg.layer == "print" and reg.score > 0.8
    assert reg.upside_down == flipped
    expected = rot + (180 if flipped else 0)
    assert (reg.rotation_deg - expected + 180) % 360 - 180 == pytest.approx(0, abs=0.3)
    assert reg.scale == pytest.approx(scale, abs=0.01)
    errors = []
    height, width = image.shape
    for name, ref in reference_centres.items():
        truth = _centres(scan.boxes[name])
        if flipped:
            truth = np.array([width, height]) - truth
        x, y = reg.to_page(ref[:, 0], ref[:, 1])
        errors += list(np.hypot(x - truth[:, 0], y - truth[:, 1]) * 300 / 200)
    # pixels at 300 dpi; the box finder's walls of the blank and the generator's differ by up to 0.8 px
    assert np.median(errors) < 1.0 and max(errors) < 2.0


def test_a_black_and_white_page_reads_with_its_template_as_the_grey_scan_does(template, tmp_path):
    grey = _filled(TICKET, 41, rot=-2.0)
    fg.save_scan(grey.image, tmp_path / "grey.png", dpi=300, optimize=False)
    fg.save_scan(_bitonal(grey, 41).image, tmp_path / "fax.tif", dpi=200, bitonal=True)  # CCITT G4
    pages = {p.source.stem: p for p in iter_pages([tmp_path / "grey.png", tmp_path / "fax.tif"])}
    model = load_model()
    without = PageReader(model).read(pages["fax"])
    assert without.problem in (BOXES_NOT_VISIBLE, SOME_BOXES_NOT_VISIBLE)

    reader = PageReader(model, templates=[template])
    fax, flatbed = reader.read(pages["fax"]), reader.read(pages["grey"])
    assert fax and fax.problem is None and fax.template == "weigh_ticket v1"
    assert fax.registration_score > 0.8
    assert [f.name for f in fax.fields] == [f.name for f in TICKET.fields]

    def right(read) -> int:
        return sum(c == d.text for f in read.fields for c, d in zip(grey.cells[f.name], f.digits) if c)

    written = sum(1 for cells in grey.cells.values() for c in cells if c)
    # the cells come from the template's boxes: without their walls they cut the same digits
    assert right(fax) >= right(flatbed) - 1 and right(fax) >= written - 2
    assert sum(f.value == grey.values[f.name] for f in fax.fields) >= len(TICKET.fields) - 1


@pytest.mark.parametrize("layout", [fg.orchard_card(), fg.tally_sheet(), fg.crate_return_slip(), fg.bin_register(),
                                    fg.recolour(fg.orchard_card(), "red", furniture=False)],
                         ids=["orchard_card", "tally_sheet", "crate_return_slip", "bin_register",
                              "orchard_card_red_fields"])
def test_black_and_white_pages_of_other_designs_do_not_match(registrar, layout):
    # The cooperative's designs share the ticket's bold title and emblem (most of its dark print by
    # area); a red-field card keeps only its black text on a black-and-white page, as the ticket does.
    rng = np.random.default_rng(17)
    form = fg.render_form(layout, fg.random_values(layout, rng=rng), dpi=200, rng=rng)
    page = fg.bitonal_scan(fg.scan_distort(form, rng=rng, skew_deg=1.5, noise=0.3), rng=rng, dpi=200)
    match = match_templates(page.image, dpi=200, registrars=[registrar])
    assert not match and "does not match" in match.problem
    assert match.registration.score < MIN_SCORE - 0.15  # the ticket's own pages score above 0.8


def test_two_versions_of_the_ticket_go_each_to_its_own_template(registrar):
    # The same black print with the red boxes a box height lower and further right: on a
    # black-and-white page only the handwriting's place tells them apart.
    moved = dataclasses.replace(TICKET, name="moved", fields=tuple(
        dataclasses.replace(f, x_mm=f.x_mm + 5, y_mm=f.y_mm + 8) for f in TICKET.fields))
    blank = _blank(moved)
    registrars = [registrar, Registrar(draft_template(find_fields(blank.image, dpi=300), name="moved"))]
    for layout, label in ((TICKET, "weigh_ticket v1"), (moved, "moved v1")):
        page = _bitonal(_filled(layout, 53), 53).image
        match = match_templates(page, dpi=200, registrars=registrars)
        assert match and match.template.label == label
        assert min(match.scores.values()) < MIN_SCORE  # and the other version is refused
