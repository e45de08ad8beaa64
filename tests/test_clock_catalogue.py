"""The clock catalogue (relcorr's own TOML format): values read as written, errors naming file and key.
Outside reference for the dates: datetime.date.toordinal (MJD = ordinal - 678576)."""
from __future__ import annotations

import datetime

import numpy as np
import pytest

from stages.physics.clock_catalogue import ClockCatalogueError, load_clock_catalogue
from tests.conftest import REPO


def test_sample_catalogue():
    cat = load_clock_catalogue(REPO / "sample_configs" / "clocks.toml")
    i = list(cat.codes).index("MRT2-RB")
    assert cat.orbiting[i] and cat.elements[i, 0] == 26561750.0 and cat.elements[i, 2] == pytest.approx(np.radians(55.0))
    assert cat.epoch_tt_mjd[i] == datetime.date(2016, 12, 31).toordinal() - 678576
    j = list(cat.codes).index("NORTHLAB-HM1")
    assert not cat.orbiting[j] and cat.station[j] == "CFL" and cat.height_above_geoid_m[j] == 312.4
    assert list(cat.index(["SOUTHLAB-HM2", "NOPE", "MRT2-RB"])) == [list(cat.codes).index("SOUTHLAB-HM2"), -1, i]


@pytest.mark.parametrize("body, words", [
    ('[clocks.X]\nkind = "floating"', "clocks.X.kind: found 'floating', expected 'orbiting' or 'ground'"),
    ('[clocks.X]\nkind = "ground"\nstation = "CFL"', "clocks.X.height_above_geoid_m: missing"),
    ('[clocks.X]\nkind = "ground"\nstation = "CFL"\nheight_above_geoid_m = "high"', "found 'high', expected a number"),
    ('[clocks.X]\nkind = "orbiting"\nsemi_major_axis_m = 7e6\neccentricity = 1.5\ninclination_deg = 0\nraan_deg = 0\n'
     'argument_of_perigee_deg = 0\nmean_anomaly_deg = 0\nelements_epoch_tt = 2020-01-01T00:00:00',
     "clocks.X.eccentricity: found 1.5, expected a number in [0.0, 0.99]"),
    ('[clocks.X]\nkind = "orbiting"\nsemi_major_axis_m = 7e6\neccentricity = 0.1\ninclination_deg = 0\nraan_deg = 0\n'
     'argument_of_perigee_deg = 0\nmean_anomaly_deg = 0\nelements_epoch_tt = 2020-01-01',
     "clocks.X.elements_epoch_tt: found datetime.date(2020, 1, 1), expected a TOML local date-time"),
    ('[clocks.X]\nkind = "ground"\nstation = "CFL"\nheight_above_geoid_m = 1\ncolour = "red"', "clocks.X.colour: unknown key"),
])
def test_errors_name_file_and_key(tmp_path, body, words):
    p = tmp_path / "c.toml"
    p.write_text('format = "relcorr-clocks/1"\n' + body + "\n")
    with pytest.raises(ClockCatalogueError) as ei:
        load_clock_catalogue(p)
    assert str(p) in str(ei.value) and words in str(ei.value)
