"""The batch file: one SQLite file with pages, fields, digits and review actions; all its SQL."""
