"""The user's guide (README and docs/) describes every output field; the README states the
method's cautions and its quick start, and stays a guide (about 250 lines at most)."""

from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text(encoding="utf-8")
#: The user's guide: the README and the pages of docs/ it points to.
GUIDE = "\n".join(
    (ROOT / name).read_text(encoding="utf-8")
    for name in ("README.md", "docs/outputs.md", "docs/method.md", "docs/command-line.md")
)


@pytest.fixture(scope="module")
def demo_result(demo_region):
    from recharge_atlas.algorithms.pipeline import run_atlas

    return run_atlas(demo_region.gauges, demo_region.catchments, demo_region.discharge)


@pytest.mark.parametrize(
    "table", ["catchments", "annual", "events", "periods", "segments", "master_recession", "links"]
)
def test_readme_describes_every_output_field(demo_result, table):
    frame = getattr(demo_result, table)
    columns = [c for c in frame.columns if c not in ("geometry", "name")]
    missing = [c for c in columns if f"`{c}`" not in GUIDE]
    assert not missing, f"the guide does not describe {table} fields {missing}"


def test_readme_daily_table_fields(demo_result):
    assert all(f"`{c}`" in GUIDE for c in demo_result.daily().columns)


def test_readme_subbasin_layer_fields(demo_region):
    from recharge_atlas.algorithms.pipeline import run_atlas_subbasins

    result = run_atlas_subbasins(demo_region.gauges, demo_region.subbasins, demo_region.discharge)
    own = [c for c in result.subbasins.columns if c not in demo_region.subbasins.columns]
    assert own and all(f"`{c}`" in GUIDE for c in own)


@pytest.mark.parametrize(
    "words",
    [
        "homogeneous aquifer",
        "no regulation, diversions, pumping or return flows",
        "3–1,300 km²",
        "Halford & Mayer 2000",
        "not regional",
        "qualified hydrogeologists",
        "make demo",
        "make test",
    ],
)
def test_readme_states_the_cautions_and_the_quick_start(words):
    assert words in README.replace("\n", " ")


def test_readme_stays_short_and_its_links_resolve():
    # Issue 15: the README reads as a user's guide; details live in docs/.
    import re

    assert len(README.splitlines()) <= 250
    for target in re.findall(r"\]\(((?:docs/)[^)#]+)\)", README):
        assert (ROOT / target).is_file(), target


def test_architecture_page_matches_the_code():
    """docs/architecture.md names every module of the core and the shells, and every
    ``module.name`` it names exists (issue 17: the page must match the code)."""
    import importlib
    import re

    page = (ROOT / "docs" / "architecture.md").read_text(encoding="utf-8")
    modules = {p.stem for p in (ROOT / "algorithms").glob("*.py") if p.stem != "__init__"}
    missing = sorted(m for m in modules if f"{m}.py" not in page and f"`{m}." not in page)
    assert not missing, f"modules the page does not name: {missing}"
    for folder, stem in re.findall(r"`(?:(algorithms|plugin)/)?(\w+)\.py", page):
        where = ROOT / (folder or "algorithms") / f"{stem}.py"
        elsewhere = [ROOT / f"{stem}.py", ROOT / "plugin" / f"{stem}.py"]
        assert where.exists() or any(p.exists() for p in elsewhere), f"{stem}.py is absent"
    for module, name in re.findall(r"`(\w+)\.(\w+)(?:\(\))?`", page):
        if name == "py":
            continue
        if module in modules:
            loaded = importlib.import_module(f"recharge_atlas.algorithms.{module}")
            assert hasattr(loaded, name), f"{module}.{name} named on the page but absent"
