"""NetCDF / Zarr temperature datasets: CF attributes (CF Conventions 1.8, sect. 3:
units, long_name, standard_name), coordinates, conditions, and the same values as the
TIFF output; written atomically."""
import numpy as np
import pytest
import tifffile

import irpipe.stages as stages
from irpipe import __version__, pipeline
from irpipe.stages.dataset import DatasetWriterStage


@pytest.fixture
def with_dataset_stage(monkeypatch):
    """The stage in the chain before the TIFF writer (as in the registry)."""
    orig = stages.registry

    def reg():
        r = [c for c in orig() if c is not DatasetWriterStage]
        return r[:-1] + [DatasetWriterStage] + r[-1:]

    monkeypatch.setattr(stages, "registry", reg)


def test_netcdf_has_cf_attributes_and_the_tiff_values(tmp_path, with_dataset_stage, small_survey):
    xr = pytest.importorskip("xarray")
    cfg = small_survey(tmp_path, chunk=4, formats="[tiff, netcdf]")
    res = pipeline.run(cfg, tmp_path / "out", quiet=True)
    out = res.report["stacks"][0]["outputs"]
    assert out["temperature_netcdf"] == "wall.temperature.nc"
    with xr.open_dataset(tmp_path / "out" / "wall.temperature.nc", engine="scipy") as ds:
        t = ds["temperature"]
        assert t.dims == ("frame", "row", "col") and t.dtype == np.float32
        assert t.attrs["units"] == "degC"
        assert t.attrs["long_name"] == "surface temperature"
        assert t.attrs["standard_name"] == "surface_temperature"
        assert ds.attrs["Conventions"].startswith("CF-")
        assert ds.attrs["software_version"] == __version__
        assert ds.attrs["condition_air_temperature_c"] == 1.0
        assert ds.attrs["condition_path"] == "forced flat transmittance 0.97"
        np.testing.assert_array_equal(ds["frame"].values, np.arange(small_survey.frames))
        tif = tifffile.imread(tmp_path / "out" / "wall.temperature.tif")
        np.testing.assert_array_equal(t.values, tif)
        assert np.isnan(t.values).sum() == np.isnan(tif).sum() > 0
    assert not [p for p in (tmp_path / "out").iterdir() if p.name.endswith(".part")]


def test_zarr_store(tmp_path, with_dataset_stage, small_survey):
    xr = pytest.importorskip("xarray")
    pytest.importorskip("zarr")
    cfg = small_survey(tmp_path, chunk=6, formats="[zarr]")
    pipeline.run(cfg, tmp_path / "out", quiet=True)
    with xr.open_zarr(tmp_path / "out" / "wall.temperature.zarr") as ds:
        t = ds["temperature"]
        assert t.attrs["standard_name"] == "surface_temperature" and t.attrs["units"] == "degC"
        assert t.encoding["chunks"] == (6, 40, 56)
        np.testing.assert_array_equal(t.values, tifffile.imread(tmp_path / "out" / "wall.temperature.tif"))


def test_failed_stack_leaves_no_dataset(tmp_path, with_dataset_stage, monkeypatch, small_survey):
    cfg = small_survey(tmp_path, chunk=4, formats="[tiff, netcdf]")
    from irpipe.stages.picture import PictureStage

    def boom(self, chunk, ctx):
        if chunk.first >= 8:
            raise RuntimeError("disk gone")
    monkeypatch.setattr(PictureStage, "process", boom)
    with pytest.raises(RuntimeError, match="disk gone"):
        pipeline.run(cfg, tmp_path / "out", quiet=True)
    left = [p.name for p in (tmp_path / "out").iterdir()]
    assert not [n for n in left if n.endswith((".nc", ".part", ".tif"))], left
