"""Recharge Atlas: groundwater recharge from streamflow records, mapped across catchments.

The repository root is both the QGIS plugin folder and the Python package ``recharge_atlas``.
This module must stay light: QGIS imports it at start-up, and scripts import the core from
``recharge_atlas.algorithms`` without QGIS. Nothing heavy is imported here.
"""


def classFactory(iface):  # noqa: N802 (QGIS calls it by this name)
    """Entry point QGIS calls to load the plugin; works when ``iface`` is None (headless)."""
    from .plugin.plugin_main import RechargeAtlasPlugin

    return RechargeAtlasPlugin(iface)
