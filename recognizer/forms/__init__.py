"""Form templates: named, typed fields with rules, check digits, aligning a page to its template."""
