"""The bad-input cases' harness: a small invented region (``messy_region``), one input
spoilt per case, the command line run on it, and what its answer must be (see
test_bad_inputs.py and test_bad_inputs_checks.py)."""

from __future__ import annotations

import shutil
from pathlib import Path

import geopandas as gpd
import pandas as pd
import pytest
from messy_region import digests, write_region
from test_end_to_end import run_args

from recharge_atlas.cli import main

NUMBERS = ["area_km2", "recession_index_days", "recharge_mm_per_year", "baseflow_index"]
SPOILT = "AB1"  # the gauge each flagged case spoils
OTHERS = ["CD2", "EF3"]


def clean_region(tmp_path_factory):
    """The region's files and its clean run (every gauge ok); each test module's ``clean``
    fixture."""
    folder = tmp_path_factory.mktemp("clean")
    paths = write_region(folder / "in")
    out = folder / "out.gpkg"
    assert main(run_args(paths, out)) == 0
    layer = gpd.read_file(out, layer="catchments").set_index("gauge_id")
    assert (layer["quality"] == "ok").all(), layer["quality"]
    return {"paths": paths, "catchments": layer}


class Case:
    """One spoilt copy of the region in a test's own folder, and what a run on it gave."""

    def __init__(self, tmp_path, clean):
        self.inputs = tmp_path / "in"
        shutil.copytree(clean["paths"]["gauges"].parent, self.inputs)
        self.paths = {k: self.inputs / p.name for k, p in clean["paths"].items()}
        self.outdir = tmp_path / "out"
        self.outdir.mkdir()
        self.out = self.outdir / "recharge.gpkg"
        self.clean = clean["catchments"]
        self.before = None

    # -- spoiling
    def discharge(self) -> pd.DataFrame:
        return pd.read_csv(self.paths["discharge"], dtype=str)

    def write_discharge(self, frame: pd.DataFrame):
        frame.to_csv(self.paths["discharge"], index=False)

    def layer(self, name) -> gpd.GeoDataFrame:
        return gpd.read_file(self.paths[name])

    def write_layer(self, name, frame):
        self.paths[name].unlink()
        frame.to_file(self.paths[name], driver="GPKG")

    # -- running
    def run(self, capsys, *extra, **paths):
        self.before = digests(self.inputs)
        given = {**self.paths, **{k: Path(v) for k, v in paths.items()}}
        self.code = main(run_args(given, self.out, *extra))
        captured = capsys.readouterr()
        self.stderr = captured.err
        self.errors = [
            line for line in self.stderr.splitlines() if line.startswith("recharge-atlas")
        ]
        assert digests(self.inputs) == self.before, "an input changed"
        return self

    def error(self, *words):
        """Exit 2, the words in a message of one or two lines, and no output at all."""
        assert self.code == 2, self.stderr
        assert 1 <= len(self.errors) <= 2, self.stderr
        assert all(len(line) < 400 for line in self.errors), self.errors
        text = "\n".join(self.errors)
        for word in words:
            assert word in text, (word, text)
        assert "Traceback" not in self.stderr
        assert list(self.outdir.iterdir()) == []
        return text

    def result(self):
        """Exit 0, the output and nothing else (no temporary file); the catchments layer."""
        assert self.code == 0, self.stderr
        assert "Traceback" not in self.stderr
        assert sorted(p.name for p in self.outdir.iterdir()) == [self.out.name]
        return gpd.read_file(self.out, layer="catchments").set_index("gauge_id")

    def flagged(self, gauge, *words, same=OTHERS):
        """Exit 0; ``gauge`` flagged with the words; the gauges ``same`` as in the clean run."""
        layer = self.result()
        quality = layer.loc[gauge, "quality"]
        assert quality != "ok"
        for word in words:
            assert word in quality, (word, quality)
        self.unchanged(layer, same)
        return layer

    def unchanged(self, layer, gauges):
        for gid in gauges:
            assert layer.loc[gid, "quality"] == self.clean.loc[gid, "quality"], gid
            for name in NUMBERS:
                assert layer.loc[gid, name] == pytest.approx(
                    self.clean.loc[gid, name], rel=1e-9, nan_ok=True
                ), (gid, name)


def _rows(frame, gauge=SPOILT):
    return frame.index[frame["gauge_id"] == gauge]
