"""Reading: one page to field values, many pages in a stream, the values CSV."""
