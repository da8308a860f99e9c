"""Templates hold together: inconsistent fields and templates are refused."""

import pytest

from recognizer.page.boxes import Box
from recognizer.forms.template import SumRule, TemplateError, TemplateField
from tests.recognizer.forms.small_templates import boxes, make


@pytest.mark.parametrize("kwargs, message", [
    ({"name": "to_check"}, "CSV"),
    ({"name": "2nd"}, "letters"),
    ({"type": "money"}, "unknown type"),
    ({"type": "decimal"}, "decimals"),
    ({"type": "decimal", "decimals": 3}, "need more than 3 boxes"),
    ({"type": "date", "date_order": "DDMMYYYY"}, "needs 8 boxes"),
    ({"type": "date", "date_order": "DDDD"}, "not DD, MM and YYYY"),
    ({"type": "code"}, "check_digit"),
    ({"check_digit": "crc"}, "unknown check digit"),
    ({"lengths": (4,)}, "lengths"),
    ({"minimum": 3}, "min and max go with"),
    ({"type": "integer", "minimum": 9, "maximum": 2}, "above max"),
])
def test_inconsistent_fields_refused(kwargs, message):
    args = {"name": "f", "boxes": boxes(3), **kwargs}
    with pytest.raises(TemplateError, match=message):
        TemplateField(**args)


def test_inconsistent_templates_refused():
    a = TemplateField("a", boxes(3), type="integer")
    with pytest.raises(TemplateError, match="twice"):
        make(a, a)
    with pytest.raises(TemplateError, match="no field 'x'"):
        make(a, sums=[SumRule("a", ("x",))])
    with pytest.raises(TemplateError, match="not a number"):
        make(a, TemplateField("b", boxes(3, 60)), sums=[SumRule("a", ("b",))])
    with pytest.raises(TemplateError, match="outside the reference"):
        make(TemplateField("a", (Box(390, 10, 420, 40),)))
