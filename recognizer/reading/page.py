"""Reading a page: boxes -> cells -> digits -> field values.

This is the stage that joins the others: :func:`read_page` finds the digit
boxes on one page (:mod:`recognizer.page.boxes`), cuts and cleans every cell
(:mod:`recognizer.page.cells`), reads all the written cells of the page in one
batched call to the digit model (:mod:`recognizer.digits.model`) and puts each field's
value together.

Field values
------------
A field's value is its written digits read left to right. Empty boxes before
the first written digit are skipped, so ``42`` written in the last two boxes of
a five-box field reads ``42``; empty boxes after the last digit are skipped
too. A field with no written box has the empty value ``""``. An empty box
*between* written digits is a gap: the value joins the digits on either side
and the field is marked ``gap`` so a person looks at it. A mark the model
calls "not a digit" stands in the value as ``?``.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from recognizer.page.boxes import NO_BOXES, Box, BoxFinding, PreparedPage, find_fields, prepare_page, warp_like
from recognizer.page.dropout import DropoutLayers, split_dropout
from recognizer.page.cells import Cell, cut_cells
from recognizer.page.loose_ink import loose_numbers
from recognizer.reading.orientation import TURNED, turned_is_better, worth_turning
from recognizer.digits.preprocess import to_model_input
from recognizer.digits.model import CLASSES, NOT_A_DIGIT, DigitModel
from recognizer.forms.registration import Registrar, match_templates
from recognizer.scans.files import Page, ScanProblem
from recognizer.scans.limits import program_error_words
from recognizer.forms.template import Template
from recognizer.forms.values import check_page
from recognizer.states import NOT_A_DIGIT_MARK, check_field, digit_to_check, layout_reasons, page_layout

__all__ = ["UNREADABLE_MARK", "DigitRead", "FieldRead", "PageRead", "PageReader", "field_value", "read_or_problem",
           "reading_of"]

#: Character standing for a mark the model calls "not a digit".
UNREADABLE_MARK = NOT_A_DIGIT_MARK


@dataclass
class DigitRead:
    """One box of a field, as read.

    ``probs`` holds the model's probabilities for the classes in
    :data:`recognizer.digits.model.CLASSES` (ten digits, then "not a digit");
    ``confidence`` is the probability of the class read. Both are ``None``
    and ``0.0`` for an empty box, whose ``text`` is ``""``.
    """

    box: int
    blank: bool
    text: str
    confidence: float
    probs: np.ndarray | None
    crop: np.ndarray

    @property
    def not_a_digit(self) -> bool:
        return self.text == UNREADABLE_MARK


@dataclass
class FieldRead:
    """One comb field: its boxes, the digit in each, and the value.

    ``doubts`` are reasons found while finding the boxes to distrust this
    field's boxes (see :class:`recognizer.page.boxes.FieldBoxes`). A page read
    with a template gives each field its ``typed`` value (see
    :func:`recognizer.forms.values.typed_value`) and the ``rule_problems`` its
    value has, each ``"<rule>: <what>"``; both are None / empty otherwise.
    """

    name: str
    boxes: tuple[Box, ...]
    digits: list[DigitRead]
    value: str
    gap: bool
    doubts: tuple[str, ...] = ()
    typed: str | None = None
    rule_problems: list[str] = field(default_factory=list)

    @property
    def written(self) -> list[DigitRead]:
        return [d for d in self.digits if not d.blank]

    def doubtful_digits(self, threshold: float | None) -> list[DigitRead]:
        """Written boxes a person must check (:func:`recognizer.states.digit_to_check`)."""
        return [d for d in self.written if digit_to_check(d.text, d.confidence, threshold)]

    def reasons(self, threshold: float | None, *, page_warnings: Sequence[str] = (),
                layout: Sequence[str] = ()) -> tuple[str, ...]:
        """Why a person must look at this field (:func:`recognizer.states.check_field`); empty if not.

        ``page_warnings`` are all its page's warnings (the rule keeps those
        that can affect this field); ``layout`` are its reasons from
        :func:`recognizer.states.layout_reasons`, if any.
        """
        return check_field(
            ((d.text, d.confidence) for d in self.written), threshold, gap=self.gap, box_doubts=self.doubts,
            rule_problems=self.rule_problems, page_warnings=page_warnings, layout=layout,
        )

    def to_check(self, threshold: float | None) -> bool:
        """Whether a person should look at this field for its own reasons (no page or layout reasons)."""
        return bool(self.reasons(threshold))

    @property
    def output(self) -> str:
        """The value for the CSV: the typed value when read with a template, else the digits."""
        return self.value if self.typed is None else self.typed


@dataclass
class PageRead:
    """Everything read off one page.

    ``problem`` is set (and ``fields`` empty) when no digit boxes could be
    found; ``warnings`` list doubtful things met while finding the boxes (a
    reason to check the fields of the page they can affect, :mod:`recognizer.states`). A page read with
    templates records the ``template`` that read it (its name and version,
    ``orchard_card v1``) and the ``registration_score``; a page that fits
    none of them has the problem set and ``template`` None.
    """

    source: Path
    page: int
    dpi: float
    skew_deg: float
    fields: list[FieldRead]
    problem: str | None = None
    warnings: list[str] = field(default_factory=list)
    image: np.ndarray | None = None
    template: str | None = None
    registration_score: float | None = None

    def __bool__(self) -> bool:
        return self.problem is None

    def digits(self) -> list[DigitRead]:
        return [d for f in self.fields for d in f.written]

    def layout(self) -> str | None:
        """The page's layout (:func:`recognizer.states.page_layout`); None when no boxes were found."""
        return None if self.problem else page_layout((f.name, len(f.boxes)) for f in self.fields)

    def field_reasons(self, threshold: float | None, *, common_layout: str | None = None) -> dict[str, tuple[str, ...]]:
        """Each field's reasons to be checked (:func:`recognizer.states.check_field`), by name.

        ``common_layout`` is the batch's layout for pages like this one (same
        template, or none); None judges the page alone (no layout reasons).
        """
        layouts = layout_reasons(self.layout(), common_layout)
        return {f.name: f.reasons(threshold, page_warnings=self.warnings, layout=layouts.get(f.name, ()))
                for f in self.fields}


#: What a page says when its boxes cannot be seen (a dropout print scanned in black and white).
BOXES_NOT_VISIBLE = "the digit boxes are not visible on this page: read it with its form template"
#: ... and when only some are: handwritten numbers stand outside the boxes found.
SOME_BOXES_NOT_VISIBLE = ("some digit boxes are not visible on this page (handwritten numbers stand outside "
                          "the boxes found): read it with its form template")
_LOOSE_DIGIT_CONFIDENCE = 0.9


_blas = None  # a threadpoolctl.ThreadpoolController, made at the first page (kept out of the window's start)


def _predict(model: DigitModel, cells: np.ndarray) -> np.ndarray:
    """``model.predict_proba(cells)`` on one BLAS thread.

    A page's cells are one small batch (tens of rows): more BLAS threads only
    spin against the thread decoding the next page and the other readers
    (ten times slower on two cores, measured by ``bench/bench_read.py``).
    Every way of reading (one process, a pool, a Dask cluster) calls the
    model so, which keeps their results the same.
    """
    global _blas
    if _blas is None:
        from threadpoolctl import ThreadpoolController

        _blas = ThreadpoolController()
    with _blas.limit(limits=1, user_api="blas"):
        return model.predict_proba(cells)


def _bitonal(image: np.ndarray) -> bool:
    """Only black and white (a 1-bit or fax-like capture), seen at every 4th pixel."""
    small = image[::4, ::4]
    return bool(np.count_nonzero((small > 16) & (small < 239)) <= 0.001 * small.size)


def reading_of(probs: np.ndarray) -> tuple[str, float]:
    """The text and confidence of one box from the model's probabilities.

    ``probs`` follows :data:`recognizer.digits.model.CLASSES`; the text is the
    digit of the most probable class, or :data:`UNREADABLE_MARK` for "not a
    digit"; the confidence is that class's probability.
    """
    best = int(np.argmax(probs))
    return (UNREADABLE_MARK if best == NOT_A_DIGIT else CLASSES[best]), float(probs[best])


def field_value(texts: list[str]) -> tuple[str, bool]:
    """Join per-box texts into a field value; return ``(value, gap)``.

    >>> field_value(["", "", "", "4", "2"])
    ('42', False)
    >>> field_value(["1", "", "3"])
    ('13', True)
    >>> field_value(["", ""])
    ('', False)
    """
    written = [i for i, t in enumerate(texts) if t]
    if not written:
        return "", False
    inner = texts[written[0] : written[-1] + 1]
    return "".join(inner), any(not t for t in inner)


class PageReader:
    """Reads pages with one digit model.

    Parameters
    ----------
    model : DigitModel
        The digit model used for every page.
    keep_image : bool
        Keep the deskewed page image on each :class:`PageRead` (the batch
        store and the window need it; a plain CSV run does not).
    templates : sequence of Template
        Form templates: each page is registered to the one it fits best and
        read at that template's boxes (the page image kept is then the page
        aligned to the template's reference). Without templates the boxes
        are found on each page.
    """

    def __init__(self, model: DigitModel, *, keep_image: bool = False,
                 templates: Sequence[Template] = ()):
        self.model = model
        self.keep_image = keep_image
        self.registrars = [Registrar(t) for t in templates]

    def prepare(self, page: Page) -> PreparedPage | None:
        """The first steps of reading ``page`` that can be taken on another thread, or None.

        A page read without templates and in grey has its working resolution,
        lighting and ink level worked out here (:func:`recognizer.page.boxes.prepare_page`);
        :meth:`read` takes them as ``prepared``. One-process reading prepares
        the next page on the thread that decodes it.
        """
        if self.registrars or page.colour is not None:
            return None
        return prepare_page(page.image, dpi=page.dpi)

    def read(self, page: Page, *, prepared: PreparedPage | None = None) -> PageRead:
        """Read one page; never raises on odd page content.

        ``prepared`` is :meth:`prepare` of this page, when already made.
        Without templates, a page whose digits read doubtfully is read again
        turned by 180 degrees, and the turned reading is kept when it is
        clearly surer (:mod:`recognizer.reading.orientation`); a template's
        registration turns an upside-down page by itself.
        """
        read = self._read_as_is(page, prepared)
        if self.registrars or not read:
            return read
        confidences = [d.confidence for f in read.fields for d in f.digits if d.text]
        if not worth_turning(confidences):
            return read
        turned = self._read_as_is(replace(
            page, image=np.ascontiguousarray(page.image[::-1, ::-1]),
            colour=None if page.colour is None else np.ascontiguousarray(page.colour[::-1, ::-1])))
        if turned and turned_is_better(confidences, [d.confidence for f in turned.fields for d in f.digits if d.text]):
            turned.warnings.append(TURNED)
            return turned
        return read

    def _read_as_is(self, page: Page, prepared: PreparedPage | None = None) -> PageRead:
        layers = split_dropout(page.colour) if page.colour is not None else None
        if self.registrars:
            read = self._read_with_template(page)
        elif layers is not None:
            read = self._read_dropout(page, layers)
        else:
            finding = find_fields(page.image, dpi=page.dpi, prepared=prepared)
            if _bitonal(page.image):
                if finding.problem == NO_BOXES:
                    finding.problem = BOXES_NOT_VISIBLE
                elif finding and self._numbers_outside_boxes(finding):
                    finding.problem = SOME_BOXES_NOT_VISIBLE
            read = self.read_finding(finding, source=page.source, page=page.page)
        read.warnings[:0] = page.warnings  # from the capture (a blurred or small photo)
        return read

    def _numbers_outside_boxes(self, finding: BoxFinding) -> bool:
        """Whether handwritten numbers stand outside the boxes found (boxes lost: a dropout print in
        black and white); see :mod:`recognizer.page.loose_ink`."""
        def classify(crops: list[np.ndarray]) -> np.ndarray:
            cells = np.stack([to_model_input(c.astype(np.float32) / 255.0) for c in crops])
            probs = _predict(self.model, cells)
            return (probs.argmax(axis=1) != NOT_A_DIGIT) & (probs.max(axis=1) >= _LOOSE_DIGIT_CONFIDENCE)

        return bool(loose_numbers(finding.image, dpi=finding.dpi, fields=finding.fields, classify=classify))

    def _read_dropout(self, page: Page, layers: DropoutLayers) -> PageRead:
        """Boxes found on the printed layer, digits cut from the ink layer (same deskew)."""
        finding = find_fields(layers.printed, dpi=page.dpi)
        ink = warp_like(finding, layers.ink)
        shown = replace(finding, image=warp_like(finding, page.image))  # the page as scanned, for review
        return self.read_finding(shown, source=page.source, page=page.page, ink=ink)

    def _read_with_template(self, page: Page) -> PageRead:
        match = match_templates(page.image, dpi=page.dpi, registrars=self.registrars,
                                dpi_known=page.dpi_origin in ("file", "render"))
        score = match.registration.score
        if not match:
            return PageRead(page.source, page.page, page.dpi, match.registration.rotation_deg, [],
                            problem=match.problem, registration_score=score)
        assert match.template is not None and match.finding is not None
        read = self.read_finding(match.finding, source=page.source, page=page.page)
        read.template, read.registration_score = match.template.label, score
        values = check_page(match.template, {f.name: [d.text for d in f.digits] for f in read.fields})
        for f in read.fields:
            f.typed, f.rule_problems = values[f.name].text, values[f.name].problems
        return read

    def read_finding(self, finding: BoxFinding, *, source: Path, page: int,
                     ink: np.ndarray | None = None) -> PageRead:
        """Read the fields of a page whose boxes have been found.

        ``ink``, when given, is the page's ink alone (a dropout-colour form,
        deskewed like ``finding.image``): the cells are cut from it, while
        ``finding.image`` is the page kept for review.
        """
        image = finding.image if self.keep_image else None
        if not finding:
            return PageRead(
                source, page, finding.dpi, finding.skew_deg, [],
                problem=finding.problem, warnings=list(finding.warnings), image=image,
            )
        cut_from, transform = finding.cells_source() if ink is None else (ink, None)
        per_field: list[list[Cell]] = [
            cut_cells(cut_from, f.boxes, dpi=finding.dpi, transform=transform) for f in finding.fields
        ]
        written = [c.mnist for cells in per_field for c in cells if not c.blank]
        probs = (
            _predict(self.model, np.stack(written))
            if written
            else np.zeros((0, len(CLASSES)))
        )
        fields: list[FieldRead] = []
        k = 0
        for boxes, cells in zip(finding.fields, per_field):
            digits: list[DigitRead] = []
            for i, cell in enumerate(cells):
                if cell.blank:
                    digits.append(DigitRead(i, True, "", 0.0, None, cell.crop))
                    continue
                p = probs[k]
                k += 1
                text, confidence = reading_of(p)
                digits.append(DigitRead(i, False, text, confidence, p, cell.crop))
            value, gap = field_value([d.text for d in digits])
            fields.append(FieldRead(boxes.name, tuple(boxes.boxes), digits, value, gap, tuple(boxes.doubts)))
        return PageRead(
            source, page, finding.dpi, finding.skew_deg, fields,
            warnings=list(finding.warnings), image=image,
        )


def read_or_problem(reader: PageReader, page: Page, prepared: PreparedPage | None = None) -> PageRead | ScanProblem:
    """``reader.read(page, prepared=prepared)``, an error of the reader on this page made its problem line.

    Every way of reading (one process, a pool, a Dask cluster) reads a page
    through this guard, so a bug met on an odd page does not stop the batch.
    """
    try:
        return reader.read(page, prepared=prepared)
    except Exception as exc:  # a bug met on an odd page must not stop the batch
        return ScanProblem(page.source, page.page, program_error_words(exc))
