"""Checks that the Python packages the core needs can be imported by QGIS's Python.

The plugin itself loads without them (the provider registers and the algorithms are listed);
an algorithm then refuses to run and says what to install. Nothing heavy is imported until a
check is asked for.
"""

from __future__ import annotations

import importlib

#: Import names the core needs, in the order they are reported.
REQUIRED = ("numpy", "pandas", "scipy", "geopandas", "shapely", "pyproj", "matplotlib")

#: Debian/Ubuntu package of each import name.
DEBIAN_PACKAGES = {
    "numpy": "python3-numpy",
    "pandas": "python3-pandas",
    "scipy": "python3-scipy",
    "geopandas": "python3-geopandas",
    "shapely": "python3-shapely",
    "pyproj": "python3-pyproj",
    "matplotlib": "python3-matplotlib",
}

#: What the usual install commands always name (the rest usually come with QGIS).
_USUAL = ("pandas", "geopandas", "scipy", "matplotlib")

_all_present = False


def missing_packages(names=REQUIRED) -> list[str]:
    """Import names among ``names`` that cannot be imported, in order.

    Any exception on import counts as missing (a broken binary install fails with more than
    ImportError). Once everything has imported, later calls return at once.
    """
    global _all_present
    if _all_present and tuple(names) == REQUIRED:
        return []
    missing = []
    for name in names:
        try:
            importlib.import_module(name)
        except Exception:  # whatever breaks the import, the package is unusable
            missing.append(name)
    if not missing and tuple(names) == REQUIRED:
        _all_present = True
    return missing


def install_message(missing) -> str:
    """A short message naming the missing packages and the commands that install them."""
    names = list(dict.fromkeys([*_USUAL, *missing]))
    debian = " ".join(DEBIAN_PACKAGES[n] for n in names if n in DEBIAN_PACKAGES)
    pip = " ".join(names)
    return (
        f"Recharge Atlas needs Python packages that QGIS's Python cannot import: "
        f"{', '.join(missing)}. "
        f"Install them and restart QGIS. On Debian or Ubuntu: sudo apt install {debian}. "
        f"On Windows, in the OSGeo4W Shell: python -m pip install {pip}."
    )


def check() -> tuple[bool, str]:
    """``(True, "")`` when every package imports, else ``(False, message)``."""
    missing = missing_packages()
    if missing:
        return False, install_message(missing)
    return True, ""
