"""Checks on the repository itself."""

from collections import Counter
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_test_modules_have_unique_names():
    # pytest imports test files by their base name: two files of the same name in tests/ and
    # tests/qgis/ stop the whole QGIS run at collection.
    names = Counter(p.name for p in (ROOT / "tests").rglob("test_*.py"))
    assert [n for n, c in names.items() if c > 1] == []


def test_core_never_imports_qgis():
    for path in (ROOT / "algorithms").glob("*.py"):
        text = path.read_text(encoding="utf-8")
        assert "import qgis" not in text and "from qgis" not in text, path.name
