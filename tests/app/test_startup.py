"""A quick start: the window's modules import nothing that only training needs.

scikit-learn (with scipy and pandas behind it) took about 5 of the 11 seconds
from launch to the first window; only training, retraining, learning and
evaluating use it, and they import it inside their functions. Checked in a
fresh interpreter (``sys.modules``), not timed: start-up time itself is
``bench/bench_window.py``'s.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys

import pytest

#: Imported only by what trains, learns or evaluates.
TRAINING_ONLY = ("sklearn", "scipy", "pandas", "matplotlib", "mlxtend", "threadpoolctl")


def _loaded_after(code: str) -> set[str]:
    probe = (f"import sys, json\n{code}\n"
             f"print(json.dumps(sorted({{m.split('.')[0] for m in sys.modules}} & set({TRAINING_ONLY!r}))))")
    done = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, timeout=120,
                          env={**os.environ, "QT_QPA_PLATFORM": "offscreen"})
    assert done.returncode == 0, done.stderr
    return set(json.loads(done.stdout.strip().splitlines()[-1]))


@pytest.mark.parametrize("code", [
    "import app.main_window",
    # the way ``inkcount window`` goes: the command line with its sub-commands, then the window
    "from recognizer.cli.main import build_parser\nbuild_parser()\nimport app.cli, app.main_window",
])
def test_the_window_starts_without_training_libraries(code: str) -> None:
    assert _loaded_after(code) == set()


def test_the_probe_sees_them_when_they_are_imported() -> None:
    assert "sklearn" in _loaded_after("import recognizer.digits.retrain as r\nr._stoppable_classifier()")
