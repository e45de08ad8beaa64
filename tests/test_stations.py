"""The station catalogue and the ``stations`` stage.

Outside references: erfa.gd2gc (WGS84 geodetic -> geocentric, NIMA TR8350.2)
for the antenna offset along the ellipsoid normal; the linear plate-motion
model of IERS Conventions (2010) ch. 4 recomputed by hand in the test.
"""
from __future__ import annotations

import erfa
import numpy as np
import pyarrow as pa
import pytest

from pipelines.cli import main
from pipelines.errors import EXIT_CONFIG
from stages.base import StageContext
from stages.physics.station_catalogue import CatalogueError, load_catalogue
from stages.stations import Stations

LON, LAT, H = np.radians(-3.9), np.radians(51.2), 300.0


def _catalogue(tmp_path, extra="", offset="[0.0, 0.0, 0.0]"):
    x, y, z = (float(v) for v in erfa.gd2gc(1, LON, LAT, H))
    text = "\n".join([
        'format = "relcorr-stations/1"',
        "[stations.AAA]",
        f"position_m = [{x!r}, {y!r}, {z!r}]",
        "velocity_m_per_yr = [0.01, -0.02, 0.03]",
        "reference_epoch = 2015-01-01",
        f"antenna_offset_enu_m = {offset}",
        "[stations.BBB]",
        f"position_m = [{x + 1000.0!r}, {y!r}, {z!r}]",
        "reference_epoch = 2015-01-01",
        "[stations.NOPOS]",
        'name = "not surveyed"',
        extra,
    ])
    p = tmp_path / "st.toml"
    p.write_text(text + "\n")
    return p


def test_plate_motion_and_antenna_offset(tmp_path):
    cat = load_catalogue(_catalogue(tmp_path, offset="[0.0, 0.0, 25.0]"))
    i = list(cat.codes).index("AAA")
    # 25 m up along the WGS84 normal = geodetic height + 25 m (reference library: erfa.gd2gc)
    assert np.allclose(cat.position_m[i], erfa.gd2gc(1, LON, LAT, H + 25.0), atol=1e-6)
    # 2015-01-01 = MJD 57023 (datetime.date.toordinal() - 678576)
    import datetime

    assert cat.epoch_mjd[i] == datetime.date(2015, 1, 1).toordinal() - 678576
    ctx = StageContext("tracking", {}, base_dir=str(tmp_path))
    mjd = 57023 + 3652.5  # ten Julian years later
    table = pa.table({"station": ["AAA", "BBB"], "observable": ["range_two_way", "range_one_way"],
                      "utc_mjd": pa.array([int(mjd)] * 2, pa.int32())})
    res = Stations().apply(table, {"catalogue": "st.toml"}, ctx)
    years = (int(mjd) - 57023) / 365.25
    expect = cat.position_m[i] + np.array([0.01, -0.02, 0.03]) * years  # IERS TN36 ch. 4, linear model
    got = np.array([res.columns[f"site_itrs_{a}_m"][0] for a in "xyz"])
    assert np.allclose(got, expect, atol=1e-9)
    tx = np.array([res.columns[f"tx_site_itrs_{a}_m"][0] for a in "xyz"])
    assert np.array_equal(tx, got)  # two-way: the same station transmits
    assert np.isnan(res.columns["tx_site_itrs_x_m"][1])  # one-way: no transmitting station


def test_unknown_station_and_station_without_coordinates_are_quarantined(tmp_path):
    _catalogue(tmp_path)
    ctx = StageContext("tracking", {}, base_dir=str(tmp_path))
    table = pa.table({
        "station": ["AAA", "ZZZ", "NOPOS", "AAA", "AAA"],
        "transmit_station": ["AAA", "AAA", "AAA", "BBB", "QQQ"],
        "observable": ["range_two_way", "range_two_way", "range_two_way", "range_three_way", "range_three_way"],
        "utc_mjd": pa.array([58000] * 5, pa.int32()),
    })
    res = Stations().apply(table, {"catalogue": "st.toml"}, ctx)
    assert list(res.quarantine["station_unknown"]) == [False, True, False, False, True]
    assert list(res.quarantine["station_without_coordinates"]) == [False, False, True, False, False]
    # three-way: the transmitting station is BBB, 1000 m away in X at 2015-01-01; AAA moved since
    years = (58000 - 57023) / 365.25
    assert res.columns["tx_site_itrs_x_m"][3] - res.columns["site_itrs_x_m"][3] == pytest.approx(1000.0 - 0.01 * years, abs=1e-9)


@pytest.mark.parametrize("extra, words", [
    ('[stations.BAD]\nposition_m = [1.0, 2.0]\nreference_epoch = 2015-01-01', "stations.BAD.position_m: found [1.0, 2.0], expected an array of three numbers"),
    ('[stations.BAD]\nposition_m = [1.0, 2.0, 3.0]\nreference_epoch = 2015-01-01', "expected an ITRF position near the Earth's surface"),
    ('[stations.BAD]\nposition_m = [6.37e6, 0.0, 0.0]\nreference_epoch = "2015"', "stations.BAD.reference_epoch: found '2015', expected a TOML date"),
    ('[stations.BAD]\nposition_m = [6.37e6, 0.0, 0.0]\nreference_epoch = 2015-01-01\nheight = 3', "stations.BAD.height: unknown key"),
])
def test_catalogue_errors_name_file_and_key(tmp_path, extra, words):
    path = _catalogue(tmp_path, extra=extra)
    with pytest.raises(CatalogueError) as ei:
        load_catalogue(path)
    assert str(path) in str(ei.value) and words in str(ei.value)


def test_bad_catalogue_is_a_config_error_before_anything_runs(tmp_path, capsys):
    (tmp_path / "raw").mkdir()
    import pyarrow.parquet as pq

    pq.write_table(pa.table({"x": [1]}), tmp_path / "raw" / "a.parquet")
    cfg = tmp_path / "run.toml"
    cfg.write_text('[pipeline]\nname="t"\nrecord_kind="tracking"\ninputs=["raw/*.parquet"]\n'
                   '[[stages]]\nuse="stations"\ncatalogue="missing.toml"\n')
    assert main(["check", str(cfg)]) == EXIT_CONFIG
    err = capsys.readouterr().err
    assert err.strip() == f"{cfg}: stages[1].catalogue: {tmp_path / 'missing.toml'}: file not found"
