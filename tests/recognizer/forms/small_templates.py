"""Small hand-made templates shared by the forms tests (test_values, test_template, test_template_file)."""

import numpy as np

from recognizer.page.boxes import Box
from recognizer.forms.template import Reference, SumRule, Template, TemplateField


def boxes(n: int, y: int = 10) -> tuple[Box, ...]:
    return tuple(Box(10 + 30 * i, y, 35 + 30 * i, y + 30) for i in range(n))


def reference() -> Reference:
    image = np.zeros((60, 80), np.uint8)
    image[10:12, 5:70] = 255
    return Reference(300.0, 400, 300, 100.0, image)


def make(*fields: TemplateField, sums=()) -> Template:
    return Template("card", 2, reference(), tuple(fields), tuple(sums))


def crates_template() -> Template:
    parts = [TemplateField(f"crates_{i}", boxes(3, 10 + 40 * i), type="integer") for i in (1, 2, 3)]
    total = TemplateField("total_crates", boxes(3, 170), type="integer", required=True)
    return make(*parts, total, sums=[SumRule("total_crates", ("crates_1", "crates_2", "crates_3"))])
