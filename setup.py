"""Packaging shim: the repository root is the QGIS plugin folder and the ``recharge_atlas`` package.

The version lives only in ``metadata.txt`` (QGIS reads it there); this file hands it to setuptools.
"""

import configparser
from pathlib import Path

from setuptools import setup

HERE = Path(__file__).resolve().parent


def plugin_version():
    parser = configparser.ConfigParser()
    parser.read(HERE / "metadata.txt", encoding="utf-8")
    return parser["general"]["version"]


setup(
    version=plugin_version(),
    package_dir={"recharge_atlas": "."},
    packages=[
        "recharge_atlas",
        "recharge_atlas.algorithms",
        "recharge_atlas.plugin",
        "recharge_atlas.plugin.help",
        "recharge_atlas.sample_layers",
    ],
    package_data={
        "recharge_atlas": ["metadata.txt", "LICENSE"],
        "recharge_atlas.plugin": ["*.svg"],
        "recharge_atlas.plugin.help": ["*.html"],
        "recharge_atlas.sample_layers": ["*.gpkg", "*.csv", "*.json"],
    },
)
