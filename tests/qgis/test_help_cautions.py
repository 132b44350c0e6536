"""The cautions every algorithm's help states come from one shared snippet,
``plugin/help/shared/cautions.html``: each help file includes it once inside its Cautions list,
no help file repeats its words, and every registered algorithm's help as QGIS shows it holds
the whole snippet (with the algorithm's own cautions around it). That full page is behind the
Help button (helpUrl, a local file); the dialog's short help (shortHelpString, also what
``qgis_process help`` prints) is one paragraph and the cautions in brief."""

from __future__ import annotations

import re

import pytest

pytest.importorskip("qgis.core")

from qgis.core import QgsApplication  # noqa: E402

#: Words the shared cautions must hold: the method's assumptions and limits, and who decides
#: (the product's requirements; the 3–1,300 km² range is common practice, marked so).
REQUIRED = (
    "homogeneous aquifer",
    "recharge spread evenly in space and quick in time",
    "no regulation, diversions, pumping or return flows",
    "perennial, baseflow-dominated streams",
    "3–1,300 km² (common practice)",
    "Halford &amp; Mayer 2000",
    "not regional underflow",
    "qualified hydrogeologists and local rules",
)
INCLUDE = "<!-- include: cautions -->"


def _algorithms():
    provider = QgsApplication.processingRegistry().providerById("recharge_atlas")
    assert provider is not None, "the provider is registered"
    algorithms = provider.algorithms()
    assert len(algorithms) == 7
    return algorithms


def test_shared_cautions_state_the_assumptions_and_limits(qgis_app):
    from recharge_atlas.plugin.base import shared_help

    shared = shared_help("cautions")
    assert shared.startswith("<li>") and shared.endswith("</li>"), "list items only"
    assert "<!--" not in shared and "\n" not in shared
    for words in REQUIRED:
        assert words in shared, words


def test_each_help_file_includes_the_cautions_once_and_repeats_none(qgis_app):
    from recharge_atlas.plugin.base import HELP_DIR

    for algorithm in _algorithms():
        path = HELP_DIR / f"{algorithm.name()}.html"
        text = path.read_text(encoding="utf-8")
        assert text.count(INCLUDE) == 1, path.name
        cautions = text[text.index("<h3>Cautions</h3>") : text.index("<h3>References</h3>")]
        assert INCLUDE in cautions, f"{path.name}: the include sits in the Cautions section"
        for words in ("homogeneous aquifer", "Halford &amp; Mayer", "qualified hydrogeologists"):
            assert words not in cautions, f"{path.name} repeats the shared cautions ({words})"


def test_every_algorithm_help_shows_the_shared_cautions(qgis_app):
    from recharge_atlas.plugin.base import help_text, shared_help

    shared = shared_help("cautions")
    for algorithm in _algorithms():
        name = algorithm.name()
        short = help_text(name)  # the full page, behind the Help button
        assert short.count(shared) == 1, name
        assert "<!--" not in short, f"{name}: an include was left unresolved"
        section = re.search(r"<h3>Cautions</h3>\s*<ul>(.*?)</ul>", short)
        assert section and shared in section.group(1), name


def test_each_help_keeps_its_own_cautions(qgis_app):
    """Where an algorithm's cautions differ, its help still says so beside the shared ones."""
    from recharge_atlas.plugin.base import help_text

    own = {
        "baseflowseparation": "does not measure groundwater",
        "eventrecharge": "Single events are less certain than annual sums",
        "linkcheck": "coarse elevation model",
        "recessionindex": "grows exponentially",
        "rechargereport": "The page repeats these cautions",
        "subbasinrecharge": "Donor estimates are borrowed, not measured",
        "catchmentrecharge": "a gauge that cannot be computed",
    }
    for algorithm in _algorithms():
        assert own[algorithm.name()] in help_text(algorithm.name()), algorithm.name()


def test_short_help_is_short_plain_and_points_to_the_full_page(qgis_app):
    # Issue 15: qgis_process help printed the whole page, about 20,000 characters on one line.
    from pathlib import Path

    from qgis.PyQt.QtCore import QUrl

    from recharge_atlas.plugin.base import help_text, shared_help

    brief = shared_help("cautions_short")
    for words in ("homogeneous aquifer", "qualified hydrogeologists", "quality field"):
        assert words in brief
    for algorithm in _algorithms():
        name = algorithm.name()
        short = algorithm.shortHelpString()
        assert 200 < len(short) <= 2000, (name, len(short))
        assert "<h3>" not in short and "<!--" not in short and brief in short, name
        page = Path(QUrl(algorithm.helpUrl()).toLocalFile())
        assert page.is_file(), name
        text = page.read_text(encoding="utf-8")
        assert text.startswith("<!DOCTYPE html>") and help_text(name) in text, name
