"""A first form template from a scan of the form: scan file -> boxes -> draft template.

The box finder (:func:`recognizer.page.boxes.find_fields`) finds the digit
fields on one page of a blank (or filled) form; each becomes an optional
``digits`` field of a draft template, named as the box finder named it
(``f01``, ``f02``, ... in reading order) or by the names given. The page itself,
its ink at :data:`recognizer.forms.registration.FEATURES_DPI`, is the draft's
reference, so pages read with the template are aligned to it. The user then
sets names, types and rules and removes what is not a digit field (in the
template editor, or in the file: :mod:`recognizer.forms.template_file`).

A form printed in a dropout colour is drafted from a colour or grey scan of
it (a black-and-white scan has lost its boxes). Its reference then holds both
the light print of the boxes and the black print (title, marks), and
black-and-white pages of the form, which keep only the black print and the
handwriting, register on that (:mod:`recognizer.forms.registration`, step 4).

:func:`draft_from_scan` is the one way from a scan file to a draft, used by
``inkcount template new`` and by the window's template editor;
:func:`draft_template` makes the draft from boxes already found.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from recognizer.page.boxes import BoxFinding, find_fields
from recognizer.scans.files import DEFAULT_PDF_DPI, ScanProblem, load_page
from recognizer.forms.registration import reference_for
from recognizer.forms.template import Template, TemplateField

__all__ = ["Draft", "draft_from_scan", "draft_template"]


@dataclass(frozen=True)
class Draft:
    """A draft template from one page of a form scan, or why there is none.

    Truthy when there is a template.

    Attributes
    ----------
    source : pathlib.Path
        The scan file, as given.
    page : int
        The page of it the draft was taken from, numbered from 1.
    template : Template or None
        The draft (see :func:`draft_template`); its reference's dpi is the
        page's. None when there is none.
    warnings : tuple of str
        Doubts of the box finder about the whole page (faint lines, a skew
        beyond the limit; see :attr:`recognizer.page.boxes.BoxFinding.warnings`).
    problem : str or None
        Why there is no template, in plain words and without the file's name:
        the page could not be read, or it holds no digit boxes.
    scan_problem : ScanProblem or None
        Set when the page could not be read at all (no such file, a damaged or
        encrypted file, no such page); its ``str`` names the file and page.
        A :class:`~recognizer.scans.files.ScanProblem` is always falsy: test
        it with ``is not None``.
    """

    source: Path
    page: int
    template: Template | None = None
    warnings: tuple[str, ...] = ()
    problem: str | None = None
    scan_problem: ScanProblem | None = None

    def __bool__(self) -> bool:
        return self.template is not None


def draft_from_scan(path: str | os.PathLike, *, page: int = 1, pdf_dpi: float = DEFAULT_PDF_DPI,
                    name: str | None = None, field_names: Sequence[str] | None = None) -> Draft:
    """Load one page of a form scan, find its digit boxes and draft a template of them.

    Parameters
    ----------
    path : str or os.PathLike
        The scan (PNG, JPEG, TIFF, BMP, PDF).
    page : int
        Its page to use, numbered from 1.
    pdf_dpi : float
        Resolution a PDF page is drawn at.
    name : str, optional
        The template's name; default the scan's file name without suffix.
    field_names : sequence of str, optional
        One name per field found, in reading order; default ``f01``, ``f02``, ...

    Returns
    -------
    Draft
        Falsy, with ``problem`` set, when the page cannot be read or holds no
        digit boxes. Never raises on odd page content.

    Raises
    ------
    ValueError
        ``field_names`` does not give one name per field found.
    TemplateError
        A name of ``name`` or ``field_names`` cannot be used (a
        :class:`ValueError` too).
    """
    source = Path(path)
    loaded = load_page(source, page, pdf_dpi=pdf_dpi)
    if isinstance(loaded, ScanProblem):
        return Draft(source, page, problem=loaded.reason, scan_problem=loaded)
    finding = find_fields(loaded.image, dpi=loaded.dpi)
    if not finding:
        return Draft(source, page, warnings=tuple(finding.warnings), problem=finding.problem)
    template = draft_template(finding, name=name or source.stem, field_names=field_names)
    return Draft(source, page, template, warnings=tuple(finding.warnings))


def draft_template(finding: BoxFinding, *, name: str, field_names: Sequence[str] | None = None) -> Template:
    """A first template from the boxes found on a (blank or filled) form.

    Every field becomes an optional ``digits`` field named as the box finder
    named it (``f01``, ...), or by ``field_names`` in reading order; the user
    then sets names, types and rules and removes what is not a digit field.

    Parameters
    ----------
    finding : BoxFinding
        From :func:`recognizer.page.boxes.find_fields` on the form (must be truthy).
    name : str
        The template's name.
    field_names : sequence of str, optional
        One name per field found, in reading order.
    """
    if not finding:
        raise ValueError(f"no fields to make a template of: {finding.problem}")
    names = list(field_names) if field_names is not None else [f.name for f in finding.fields]
    if len(names) != len(finding.fields):
        raise ValueError(f"{len(names)} field names given for {len(finding.fields)} fields found")
    fields = tuple(TemplateField(n, f.boxes) for n, f in zip(names, finding.fields))
    return Template(name, 1, reference_for(finding.image, dpi=finding.dpi), fields)
