"""The house rules of the code base, checked so that they stay.

- Imports point one way: pages and workflows (front) <- printed output
  (reports) <- life engine (scheduling) <- register (fleet); the engine's
  arithmetic imports no Django.  The contracts are in pyproject.toml and are
  checked by import-linter (``lint-imports``), which .ci/run also runs.
- No module outside migrations and tests is longer than about 600 lines.
"""

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
LAYERS = ("fleet", "scheduling", "reports", "front", "fixtures", "config")
MAX_LINES = 600


def test_imports_keep_to_the_layers():
    lint = Path(sys.executable).with_name("lint-imports")
    result = subprocess.run([str(lint), "--no-cache"], cwd=ROOT, capture_output=True, text=True, timeout=300)
    assert result.returncode == 0, result.stdout[-3000:] + result.stderr[-2000:]
    assert "Contracts: 2 kept, 0 broken." in result.stdout


def test_no_module_hides_its_structure_in_length():
    long = []
    for package in LAYERS:
        for path in (ROOT / package).rglob("*.py"):
            parts = path.relative_to(ROOT).parts
            if "migrations" in parts or "tests" in parts:
                continue
            n = sum(1 for _ in path.open(encoding="utf-8"))
            if n > MAX_LINES:
                long.append(f"{path.relative_to(ROOT)}: {n} lines")
    assert not long, "split by concern: " + "; ".join(long)
