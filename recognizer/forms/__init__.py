"""Form templates: named, typed fields with rules, check digits, aligning a page to its template.

``template`` (the model and its checks), ``values`` (typed values and rules),
``editing`` (editing steps), ``template_file`` (the JSON file), ``drafting``
(a first template from a form scan), ``registration`` (aligning a page to a
template's reference), ``checkdigits``.
"""
