"""Helpers shared by the tests: hand-made batches, held-out digits, the command line, paths."""

from pathlib import Path

#: The repository's top folder.
REPO = Path(__file__).resolve().parents[2]
#: The bundled sample forms (invented Larkhollow Orchard Cooperative cards).
SAMPLES = REPO / "sample_forms"
#: Small test files (a password-protected PDF).
DATA = REPO / "tests" / "data"
