"""More made-up Larkhollow Orchard Cooperative forms, one per comb style.

Besides the weigh-in card (closed boxes, :func:`recognizer.synth.layouts.orchard_card`):

- :func:`tally_sheet`: an A4 picking tally sheet in separate square boxes;
- :func:`crate_return_slip`: an A5 slip in open combs, with a date DD/MM/YYYY and
  a time HH:MM whose groups are separated by printed ``/`` and ``:``, and a
  deposit with a decimal point;
- :func:`weigh_ticket`: an A5 weighbridge ticket in closed boxes printed in
  dropout red, with a black title, emblem and corner marks;
- :func:`bin_register`: an A4 landscape bin register, a ruled table whose
  cells hold the comb fields.

Any design can be printed in another colour with
:func:`recognizer.synth.layouts.recolour`.  :data:`DESIGNS` lists them all by
name.  The designs and names are our own.
"""

from __future__ import annotations

from collections.abc import Sequence

from recognizer.synth.layouts import (
    FieldSpec, FormLayout, Furniture, Line, Logo, Rect, Table, Text, orchard_card,
)

SEPARATOR_HEIGHT = {"/": 0.75, ":": 0.65, ".": 0.85, "-": 0.55}
"""Cap height of a printed separator as a fraction of the box height."""


def grouped_fields(names: Sequence[str], groups: Sequence[int], x_mm: float, y_mm: float, *,
                   separator: str = "/", label: str = "", box_mm: float = 6.0,
                   aspect: float = 1.2, style: str = "open", kinds: Sequence[str] = (),
                   colour: str = "") -> tuple[tuple[FieldSpec, ...], tuple[Furniture, ...]]:
    """Groups of digits with a printed separator between them, e.g. a date DD/MM/YYYY.

    Every group is a field of its own (``names[i]`` with ``groups[i]`` boxes),
    one box width after the previous one; the separator is printed centred in
    that gap, standing on the line under the boxes.  ``label`` goes above the
    first group.

    Returns
    -------
    (fields, furniture)
        The fields left to right and the separators as :class:`Text`.
    """
    if len(names) != len(groups):
        raise ValueError("one name per group")
    height = box_mm * aspect
    fields, marks = [], []
    x = x_mm
    for i, (name, n) in enumerate(zip(names, groups)):
        kind = kinds[i] if kinds else ""
        fields.append(FieldSpec(name, label if i == 0 else "", n, x, y_mm, box_mm, aspect,
                                style=style, colour=colour, kind=kind))
        x += n * box_mm
        if i < len(groups) - 1:
            bold = separator == "."
            marks.append(Text(separator, x + box_mm / 2, y_mm + height - 0.4,
                              SEPARATOR_HEIGHT.get(separator, 0.6) * height, bold, colour,
                              "centre"))
            x += box_mm
    return tuple(fields), tuple(marks)


def _emblem_and_title(subtitle: str, *, colour: str = "", x_mm: float = 14.0) -> tuple[Furniture, ...]:
    """The cooperative's emblem, name and the form's subtitle at the top left."""
    return (
        Logo(x_mm + 2, 13, 6.5, colour),
        Text("Larkhollow Orchard Cooperative", x_mm + 12, 12, 5.0, True, colour),
        Text(subtitle, x_mm + 12, 19, 2.6, False, colour),
    )


def tally_sheet() -> FormLayout:
    """The picking tally sheet (A4 portrait): separate square boxes with gaps.

    Fields in reading order: ``tally_date`` (8, DDMMYYYY), ``block_number``
    (2), ``team_number`` (3), ``sheet_number`` (2); then ten picker lines
    ``picker_k`` (4), ``bins_k`` (2), ``crates_k`` (3), ``rejects_k`` (2) for
    k = 1..10; then ``total_bins`` (3) and ``total_crates`` (4).
    """
    box = dict(box_mm=6.5, aspect=1.0, gap_mm=2.0)

    def field(name: str, label: str, n: int, x: float, y: float, kind: str = "") -> FieldSpec:
        return FieldSpec(name, label, n, x, y, **box, style="separate", kind=kind)

    fields = [
        field("tally_date", "Date (DD MM YYYY)", 8, 20, 44, "date"),
        field("block_number", "Block", 2, 100, 44, "count"),
        field("team_number", "Team", 3, 130, 44),
        field("sheet_number", "Sheet", 2, 170, 44, "count"),
    ]
    furniture: list[Furniture] = [
        *_emblem_and_title("Picking tally sheet  -  one sheet per team and day", x_mm=20),
        Text("Write one digit per box, in ink.", 150, 31, 2.4),
        Text("Picker no.", 24, 64, 2.6), Text("Bins", 72, 64, 2.6),
        Text("Crates", 104, 64, 2.6), Text("Rejected crates", 146, 64, 2.6),
        Line(14, 66, 196, 66),
    ]
    for k in range(1, 11):
        y = 56 + 15 * k
        furniture.append(Text(f"{k}.", 14, y + 5.2, 2.6))
        fields += [field(f"picker_{k}", "", 4, 24, y),
                   field(f"bins_{k}", "", 2, 72, y, "count"),
                   field(f"crates_{k}", "", 3, 104, y, "count"),
                   field(f"rejects_{k}", "", 2, 146, y, "count")]
    fields += [field("total_bins", "Total bins", 3, 72, 232, "count"),
               field("total_crates", "Total crates", 4, 104, 232, "count")]
    furniture += [
        Line(14, 224, 196, 224),
        Text("Totals", 24, 237.5, 3.0, True),
        Text("Notes", 22, 252, 2.6), Rect(20, 254, 170, 22),
        Text("Team leader", 20, 286, 2.4), Line(44, 286, 96, 286),
        Text("Checked by", 110, 286, 2.4), Line(132, 286, 190, 286),
        Text("Larkhollow Orchard Cooperative - return this sheet to the packhouse office", 20, 292, 1.8),
    ]
    return FormLayout("tally_sheet", (210.0, 297.0), tuple(fields),
                      "Larkhollow Orchard Cooperative - Picking tally sheet", tuple(furniture))


def crate_return_slip() -> FormLayout:
    """The crate return slip (A5 landscape): open combs, taller end ticks.

    Fields in reading order: ``slip_number`` (6); ``grower_number`` (5),
    ``return_day`` (2) / ``return_month`` (2) / ``return_year`` (4),
    ``return_hour`` (2) : ``return_minute`` (2); ``crates_returned`` (3),
    ``crates_damaged`` (2), ``deposit`` (3) . ``deposit_cents`` (2);
    ``bin_tag`` (6), ``checker_number`` (3).
    """
    def comb(name: str, label: str, n: int, x: float, y: float, kind: str = "") -> FieldSpec:
        return FieldSpec(name, label, n, x, y, style="open", kind=kind)

    date, date_marks = grouped_fields(("return_day", "return_month", "return_year"), (2, 2, 4),
                                      58, 34, label="Return date (DD/MM/YYYY)",
                                      kinds=("day", "month", "year"))
    time, time_marks = grouped_fields(("return_hour", "return_minute"), (2, 2), 134, 34,
                                      separator=":", label="Time (HH:MM)",
                                      kinds=("hour", "minute"))
    money, money_marks = grouped_fields(("deposit", "deposit_cents"), (3, 2), 84, 58,
                                        separator=".", label="Deposit refunded",
                                        kinds=("count", ""))
    fields = (
        comb("slip_number", "Slip no.", 6, 150, 10),
        comb("grower_number", "Grower no.", 5, 14, 34), *date, *time,
        comb("crates_returned", "Crates returned", 3, 14, 58, "count"),
        comb("crates_damaged", "Damaged", 2, 52, 58, "count"), *money,
        comb("bin_tag", "Bin tag", 6, 14, 82),
        comb("checker_number", "Checker no.", 3, 70, 82),
    )
    furniture: tuple[Furniture, ...] = (
        *_emblem_and_title("Crate return slip  -  hand in with the empty crates"),
        *date_marks, *time_marks, *money_marks,
        Text("Remarks", 134, 54, 2.6), Rect(134, 56, 62, 40),
        Text("Crates were (tick)", 14, 106, 2.4),
        Rect(48, 102.5, 3.5, 3.5), Text("clean", 53, 106, 2.4),
        Rect(68, 102.5, 3.5, 3.5), Text("washed", 73, 106, 2.4),
        Rect(92, 102.5, 3.5, 3.5), Text("muddy", 97, 106, 2.4),
        Text("Received by", 14, 132, 2.4), Line(38, 132, 90, 132),
        Text("Grower signature", 104, 132, 2.4), Line(134, 132, 196, 132),
        Text("Larkhollow Orchard Cooperative - crates stay the property of the cooperative",
             14, 142, 1.8),
    )
    return FormLayout("crate_return_slip", (210.0, 148.0), fields,
                      "Larkhollow Orchard Cooperative - Crate return slip", furniture)


def weigh_ticket(colour: str = "red") -> FormLayout:
    """The weighbridge ticket (A5 portrait): closed boxes in a dropout colour.

    The boxes, their labels and the other printed lines are in ``colour``;
    the emblem, the title and four corner marks are black, as on real dropout
    forms (they stay visible when the colour drops out).  Fields in reading
    order: ``ticket_number`` (6), ``weigh_date`` (8, DDMMYYYY);
    ``trailer_number`` (4), ``grower_number`` (5), ``bins`` (2); ``gross_kg``
    (5); ``tare_kg`` (5); ``net_kg`` (5); ``sample_number`` (4).
    """
    def box(name: str, label: str, n: int, x: float, y: float, kind: str = "") -> FieldSpec:
        return FieldSpec(name, label, n, x, y, style="closed", kind=kind)

    fields = (
        box("ticket_number", "Ticket no.", 6, 14, 40),
        box("weigh_date", "Date (DD MM YYYY)", 8, 62, 40, "date"),
        box("trailer_number", "Trailer", 4, 14, 62),
        box("grower_number", "Grower no.", 5, 48, 62),
        box("bins", "Bins", 2, 90, 62, "count"),
        box("gross_kg", "Gross weight (kg)", 5, 14, 86),
        box("tare_kg", "Tare (kg)", 5, 14, 108),
        box("net_kg", "Net weight (kg)", 5, 14, 130),
        box("sample_number", "Sample no.", 4, 14, 156),
    )
    marks: list[Furniture] = []
    for x, y, dx, dy in ((4, 4, 1, 1), (144, 4, -1, 1), (4, 206, 1, -1), (144, 206, -1, -1)):
        marks += [Line(min(x, x + 5 * dx), y, max(x, x + 5 * dx), y, 0.6, "black"),
                  Line(x, min(y, y + 5 * dy), x, max(y, y + 5 * dy), 0.6, "black")]
    furniture: tuple[Furniture, ...] = (
        *_emblem_and_title("Weighbridge ticket", colour="black", x_mm=16),
        *marks,
        Text("Weighbridge 2  -  Packhouse Lane", 28, 25, 2.2, False, "black"),
        Text("Operator remarks", 60, 84, 2.4), Rect(60, 86, 74, 50),
        Text("Load (tick)", 60, 150, 2.4),
        Rect(82, 146.5, 3.5, 3.5), Text("dessert", 87, 150, 2.4),
        Rect(106, 146.5, 3.5, 3.5), Text("juice", 111, 150, 2.4),
        Text("Weighed by", 14, 184, 2.4), Line(36, 184, 80, 184),
        Text("Driver", 88, 184, 2.4), Line(100, 184, 134, 184),
        Text("Larkhollow Orchard Cooperative - keep this ticket with the load", 14, 196, 1.8,
             False, "black"),
    )
    return FormLayout("weigh_ticket", (148.0, 210.0), fields,
                      "Larkhollow Orchard Cooperative - Weighbridge ticket", furniture, colour)


BIN_REGISTER_COLUMNS = (  # header, width mm, field prefix, boxes, kind
    ("Line", 16.0, "", 0, ""),
    ("Bin no.", 56.0, "bin", 5, ""),
    ("Block", 30.0, "block", 2, "count"),
    ("Row", 36.0, "row", 3, "count"),
    ("Crates", 36.0, "crates", 3, "count"),
    ("Net kg", 44.0, "net_kg", 4, ""),
    ("Checked", 39.0, "", 0, ""),
)


def bin_register(n_lines: int = 8) -> FormLayout:
    """The bin register (A4 landscape): closed combs inside the cells of a ruled table.

    Fields in reading order: ``register_date`` (8, DDMMYYYY), ``sheet_number``
    (3), ``block_number`` (2), all closed boxes above the table; then per table
    line k = 1..``n_lines`` ``bin_k`` (5), ``block_k`` (2), ``row_k`` (3),
    ``crates_k`` (3), ``net_kg_k`` (4), each comb centred in its cell.
    """
    row_mm, box_mm, aspect = 12.0, 6.0, 1.2
    table = Table(20, 54, tuple(c[1] for c in BIN_REGISTER_COLUMNS), row_mm, n_lines + 1,
                  tuple(c[0] for c in BIN_REGISTER_COLUMNS))
    fields = [
        FieldSpec("register_date", "Date (DD MM YYYY)", 8, 20, 34, style="closed", kind="date"),
        FieldSpec("sheet_number", "Sheet", 3, 100, 34, style="closed", kind="count"),
        FieldSpec("block_number", "Block", 2, 140, 34, style="closed", kind="count"),
    ]
    furniture: list[Furniture] = [
        *_emblem_and_title("Bin register  -  every full bin leaving the orchard", x_mm=20),
        table,
        Text("Write one digit per box, in ink.", 220, 40, 2.4),
    ]
    for k in range(1, n_lines + 1):
        for col, (_, _, prefix, n, kind) in enumerate(BIN_REGISTER_COLUMNS):
            x0, y0, x1, y1 = table.cell_mm(k, col)
            if not n:
                if col == 0:
                    furniture.append(Text(str(k), x0 + 5, y0 + 8, 2.8))
                continue
            x = x0 + (x1 - x0 - n * box_mm) / 2
            y = y0 + (row_mm - box_mm * aspect) / 2
            fields.append(FieldSpec(f"{prefix}_{k}", "", n, x, y, box_mm, aspect,
                                    style="table", kind=kind))
    bottom = 54 + row_mm * (n_lines + 1)
    furniture += [
        Text("Remarks", 20, bottom + 8, 2.6), Rect(20, bottom + 10, 257, 16),
        Text("Orchard supervisor", 20, 202, 2.4), Line(52, 202, 120, 202),
        Text("Larkhollow Orchard Cooperative - bin register", 220, 202, 1.8),
    ]
    return FormLayout("bin_register", (297.0, 210.0), tuple(fields),
                      "Larkhollow Orchard Cooperative - Bin register", tuple(furniture))


DESIGNS = {
    "orchard_card": orchard_card,
    "tally_sheet": tally_sheet,
    "crate_return_slip": crate_return_slip,
    "weigh_ticket": weigh_ticket,
    "bin_register": bin_register,
}
"""Every Larkhollow design by name (the benchmark page aside)."""

DESIGN_STYLES = {
    "orchard_card": "closed",
    "tally_sheet": "separate",
    "crate_return_slip": "open",
    "weigh_ticket": "closed",
    "bin_register": "table",
}
"""The comb style each design is printed in (the weigh ticket's boxes are also dropout red)."""
