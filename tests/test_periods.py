"""Periods as analysts write them, the one spacing rule, and joins, on the open panels that ship
inside libpysal (read from the installed package; nothing is downloaded; skipped when absent)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from conftest import grid_layer
from mapdrift.errors import InputError
from mapdrift.panel import InputSpec, load_panel
from mapdrift.periods import parse_periods, read_periods, spacing


def _example(name: str, *files: str) -> list[Path]:
    libpysal = pytest.importorskip("libpysal")
    base = Path(libpysal.__file__).parent / "examples" / name
    paths = [base / f for f in files]
    missing = [p for p in paths if not p.exists()]
    if missing:
        pytest.skip(f"libpysal example {name!r} not bundled in this install ({missing[0].name})")
    return paths


def _codes(panel):
    return {f.code: f for f in panel.findings}


# -- forms ---------------------------------------------------------------------------------------
def test_two_digit_years_assume_a_century():
    r = read_periods(["74", "79"], where="t")
    assert r.mapping == {"74": 1974, "79": 1979}
    f = r.findings[0]
    assert f.code == "periods-century-assumed" and "20th century" in f.message
    assert read_periods(["05", "10"], where="t").mapping == {"05": 2005, "10": 2010}


def test_multi_year_periods_keep_their_label_and_sort_by_end():
    r = read_periods(["2015-2019", "2010-2014", "2020–2024"], where="t")
    assert r.mapping == {"2015-2019": 2019, "2010-2014": 2014, "2020–2024": 2024}
    assert r.labels[2019] == "2015-2019"
    assert read_periods(["2015-19", "2016-20"], where="t").mapping == {
        "2015-19": 2019,
        "2016-20": 2020,
    }
    # school/fiscal years written 2010-11 are ranges, not November
    assert read_periods(["2010-11", "2011-12"], where="t").mapping == {
        "2010-11": 2011,
        "2011-12": 2012,
    }
    # a month column stays months
    assert str(parse_periods(["2020-03", "2020-04"], where="t")["2020-03"]) == "2020-03"


def test_unreadable_period_names_the_columns_and_the_fix():
    with pytest.raises(InputError) as err:
        read_periods(
            ["2019", "LY_ID"],
            where="t.csv",
            columns={"2019": "PO2019", "LY_ID": "POLY_ID"},
            hint=r"PO(\d+)",
        )
    msg = str(err.value)
    assert "POLY_ID" in msg and r"--columns 'PO(\d+)'" in msg


# -- the one spacing rule ---------------------------------------------------------------------------
def test_spacing_rule():
    yearly = spacing([2015, 2016, 2019])
    assert yearly.step == 1 and yearly.gaps == ("2017", "2018") and yearly.step_label == "one year"
    decades = spacing([1940, 1950, 1960, 1970])
    assert decades.gaps == () and decades.step_label == "one step (10 years)"
    uneven = spacing([1984, 1988, 1993])
    assert (
        uneven.step is None and uneven.adjacent == (True, True) and uneven.step_label == "one step"
    )
    import pandas as pd

    quarters = spacing([pd.Period("2020Q1"), pd.Period("2020Q2"), pd.Period("2020Q4")])
    assert quarters.gaps == ("2020Q3",) and quarters.step_label == "one quarter"


def test_changes_use_the_same_rule():
    from mapdrift.changes.transitions import adjacent_steps

    for periods in ([1984, 1988, 1993], [1940, 1950, 1970], [2015, 2016, 2019]):
        assert tuple(adjacent_steps(periods).tolist()) == spacing(periods).adjacent


def test_long_table_with_range_periods(layer_file, table_file):
    ids = [f"{i + 1:05d}" for i in range(4)]
    rows = [
        {"unit_id": u, "period": p, "rate": 1.0} for u in ids for p in ["2015-2019", "2010-2014"]
    ]
    p = load_panel(
        InputSpec(
            geometry=layer_file(n_side=2),
            table=table_file(rows),
            id="unit_id",
            period="period",
            value="rate",
        )
    )
    assert p.periods == (2014, 2019) and p.period_labels == ("2010-2014", "2015-2019")
    assert p.period_index("2015-2019") == 1 and p.period_index(2019) == 1
    assert "periods-gap" not in _codes(p) and p.step_label == "one step (5 years)"


def test_wide_range_columns_found_without_a_pattern(layer_file, table_file):
    ids = [f"{i + 1:05d}" for i in range(4)]
    rows = [{"unit_id": u, "rate_2010-2014": 1.0, "rate_2015-2019": 2.0} for u in ids]
    p = load_panel(InputSpec(geometry=layer_file(n_side=2), table=table_file(rows), id="unit_id"))
    assert p.period_labels == ("2010-2014", "2015-2019") and p.periods == (2014, 2019)
    with pytest.raises(InputError, match="not a range of years"):
        read_periods(["2019_01", "2019_02"], where="t")


# -- libpysal's bundled panels ---------------------------------------------------------------------
def test_nc_sids_two_digit_years_from_counts():
    # libpysal example 'sids2' (North Carolina SIDS, Cressie 1993): SID74/SID79 deaths and
    # BIR74/BIR79 births per county; checked against the same .dbf read by geopandas directly.
    import geopandas as gpd

    (shp,) = _example("sids2", "sids2.shp")
    p = load_panel(
        InputSpec(
            geometry=shp,
            id="FIPS",
            name="NAME",
            numerator=r"SID(\d+)",
            denominator=r"BIR(\d+)",
            per=1000,
        )
    )
    assert p.periods == (1974, 1979) and p.n_units == 100
    assert "20th century" in _codes(p)["periods-century-assumed"].message
    raw = gpd.read_file(shp).set_index("FIPS").loc[list(p.units)]
    np.testing.assert_array_equal(p.numerator, raw[["SID74", "SID79"]].to_numpy(float))
    np.testing.assert_array_equal(p.denominator, raw[["BIR74", "BIR79"]].to_numpy(float))
    np.testing.assert_allclose(p.values[:, 1], raw["SID79"] / raw["BIR79"] * 1000)
    assert p.meta.variable == "SID rate"


def test_st_louis_multi_year_tokens_and_regex_columns():
    # libpysal example 'stl' (St. Louis region homicides): HR7984, HR8488, HR8893 are homicide
    # rates for 1979-84, 1984-88 and 1988-93 (stl_hom.html shipped with the example).
    (shp,) = _example("stl", "stl_hom.shp")
    with pytest.raises(InputError, match=r"POLY_ID_OG.*--columns 'PO\(\\d\+\)'"):
        load_panel(InputSpec(geometry=shp, id="FIPS", columns="PO*"))
    p = load_panel(InputSpec(geometry=shp, id="FIPS", name="NAME", columns=r"HR(\d+)"))
    assert p.period_labels == ("1979-1984", "1984-1988", "1988-1993")
    assert p.periods == (1984, 1988, 1993)
    codes = _codes(p)
    assert (
        "periods-gap" not in codes
        and "periods-irregular" in codes
        and "periods-multi-year" in codes
    )
    assert p.spacing.adjacent == (True, True) and p.step_label == "one step"
    assert p.period_span == "1979-1984 to 1988-1993"
    pop = load_panel(
        InputSpec(geometry=shp, id="FIPS", columns=r"PO(\d+)")
    )  # POLY_ID_OG not caught
    assert pop.n_periods == 3


def test_mexico_decades_and_name_hints():
    # libpysal example 'mexico' (Mexican states' GDP per capita by decade, 1940-2000): the table
    # spells five states differently from the layer (e.g. "Quertaro" vs "Queretaro de Arteaga").
    shp, csv = _example("mexico", "mexicojoin.shp", "mexico.csv")
    p = load_panel(
        InputSpec(geometry=shp, table=csv, id="NAME", table_id="State", columns="pcgdp*")
    )
    assert p.periods == tuple(range(1940, 2001, 10))
    codes = _codes(p)
    assert "periods-gap" not in codes and p.step_label == "one step (10 years)"
    hint = codes["ids-table-only"].message
    assert "Quertaro -> Queretaro de Arteaga?" in hint and "Veracruz -> Veracruz-Llave?" in hint
    blank = codes["units-no-values"]
    assert blank.level == "warning" and blank.message.startswith("16% of layer units")
    # joined on the wrong layer column, the error points at the right one
    with pytest.raises(InputError, match=r"the layer's column 'NAME' holds \d+% .*--id NAME"):
        load_panel(
            InputSpec(geometry=shp, table=csv, id="POLY_ID", table_id="State", columns="pcgdp*")
        )
    # Aguascalientes, 1940: 10384 (mexico.csv as shipped)
    assert p.values[p.units.index("Aguascalientes"), 0] == 10384


def test_us_income_suggests_the_table_id_column():
    # libpysal example 'us_income' (US state per-capita income 1929-2009, usjoin.csv): the table
    # names states in "Name", the layer in "STATE_NAME".
    shp, csv = _example("us_income", "us48.shp", "usjoin.csv")
    with pytest.raises(InputError, match=r"no column 'STATE_NAME'.*column 'Name'.*--table-id Name"):
        load_panel(InputSpec(geometry=shp, table=csv, id="STATE_NAME"))
    p = load_panel(InputSpec(geometry=shp, table=csv, id="STATE_NAME", table_id="Name"))
    assert p.n_periods == 81 and p.spacing.gaps == () and p.step_label == "one year"
    # Alabama, 1929: 323 dollars (usjoin.csv as shipped)
    assert p.values[p.units.index("Alabama"), 0] == 323


def test_layer_without_the_table_id_and_no_match_still_names_columns(layer_file, table_file):
    layer = layer_file(gdf=grid_layer(2))
    t = table_file("code,year,rate\nx,2020,1\n", "n.csv")
    with pytest.raises(InputError, match=r"no column 'unit_id' \(--id\)"):
        load_panel(InputSpec(geometry=layer, table=t, id="unit_id", period="year", value="rate"))
    assert np.isfinite(1)
