"""One page: finding the digit boxes and cutting and cleaning each box.

``boxes`` (:func:`~recognizer.page.boxes.find_fields` and its results), with
its stages ``ruling`` (lighting, ink, skew, ruling lines, regions) and
``box_rows`` (which regions are digit boxes); ``cells`` (cutting and cleaning
each box).
"""
