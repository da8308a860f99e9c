"""A page on which a field was not found is flagged, and the field is named (issue 10).

The cards are generated (our invented weigh-in card, drawn handwriting): two
whole cards and one printed without its block-number field, as when a field's
boxes are lost to a tear, a fold or a heavy stamp.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from recognizer.cli.main import main
from recognizer.synth.capture import save_scan
from recognizer.synth.layouts import fnames, orchard_card, random_values
from recognizer.synth.render import render_form


def test_a_page_lacking_a_field_names_it_and_flags_where_it_was_lost(tmp_path, capsys):
    rng = np.random.default_rng(31)
    card = orchard_card()
    lost = "block_number"  # f03, 2 boxes, between the 8-box date and the 3-box row number
    short = dataclasses.replace(card, fields=tuple(f for f in card.fields if f.name != lost))
    scans = tmp_path / "scans"
    scans.mkdir()
    for name, layout in (("a.png", card), ("b.png", card), ("c.png", short)):
        values = {k: v for k, v in random_values(card, rng=rng).items() if k != lost or layout is card}
        form = render_form(layout, values, dpi=200, rng=rng)
        save_scan(form.image, scans / name, dpi=200)
    batch = tmp_path / "cards.inkcount"
    assert main(["read", str(scans), "--batch", str(batch)]) == 0
    capsys.readouterr()
    assert main(["review", str(batch), "--list"]) == 0
    listing = capsys.readouterr().out
    assert fnames(card)[lost] == "f03"
    about_c = [line for line in listing.splitlines() if "c.png" in line]
    assert any("not found on this page: f03 (2 boxes)" in line for line in about_c), listing
    assert not any("not found on this page" in line for line in listing.splitlines() if "c.png" not in line)
