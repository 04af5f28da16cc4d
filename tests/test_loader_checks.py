"""Loader checks a new user's files need: counts above their base, a negative missing-value code
(-999) in a value column, and a typo period far outside the others (2109 among 2015-2023).

Each check runs on real files written to tmp_path (grid layers and tables of our own, test
scaffolding) and, where one fits, on libpysal's bundled open panels: the real panels must not
raise the new warnings, and a real panel with a planted defect must.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from conftest import long_rows
from mapdrift import _loader
from mapdrift.panel import InputSpec, load_panel
from mapdrift.periods import outlying
from pysal_examples import example_dir

NEW = {"rates-over-base", "values-negative-code", "periods-outlying"}
IDS = [f"{i + 1:05d}" for i in range(9)]
YEARS = list(range(2015, 2024))


def _find(panel, code):
    found = [f for f in panel.findings if f.code == code]
    assert found, f"no {code} in {[f.code for f in panel.findings]}"
    return found[0]


def _codes(panel):
    return {f.code for f in panel.findings}


def _counts(ids=IDS, years=YEARS):
    """Filings (10 + i) among parcels (500 + 10 i) per unit and year: every rate is below per."""
    return [
        {"unit_id": u, "year": y, "filings": 10 + i, "parcels": 500 + 10 * i}
        for i, u in enumerate(ids)
        for y in years
    ]


def _count_spec(layer, table, **kw):
    return InputSpec(
        geometry=layer,
        table=table,
        id="unit_id",
        period="year",
        numerator="filings",
        denominator="parcels",
        **kw,
    )


# -- 1. counts above their base ------------------------------------------------------------------
def test_counts_above_their_base_are_named_with_unit_period_and_values(layer_file, table_file):
    rows = _counts()
    for k in (4, 30, 31, 60):  # 4 rows with the two columns swapped
        rows[k]["filings"], rows[k]["parcels"] = rows[k]["parcels"], rows[k]["filings"]
    p = load_panel(_count_spec(layer_file(n_side=3), table_file(rows, "filings.csv")))
    f = _find(p, "rates-over-base")
    assert f.level == "warning"
    # rows[4] is unit 00001 in 2019 (9 years per unit): 500 filings among 10 parcels
    assert f.message.startswith("filings.csv: 4 unit-periods have more 'filings' than 'parcels'")
    assert "00001 in 2019: 500 > 10" in f.message
    assert "above 1,000 per 1,000 is impossible" in f.message and "swapped" in f.message
    assert set(f.units) == {"00001", "00004", "00007"}
    # the rates are kept as computed (never altered silently): 500 / 10 * 1000
    assert p.values[0, 4] == pytest.approx(50_000.0)


def test_rates_within_their_base_raise_nothing(layer_file, table_file):
    p = load_panel(_count_spec(layer_file(n_side=3), table_file(_counts())))
    assert not NEW & _codes(p)


def test_sids_counts_never_exceed_births_and_swapped_columns_are_named():
    # libpysal example 'sids2' (North Carolina SIDS 1974-78 / 1979-84, Cressie 1993): deaths
    # (SID74, SID79) among births (BIR74, BIR79) per county; a death count never exceeds births.
    shp = example_dir("sids2", "sids2.shp", "sids2.dbf", "sids2.shx") / "sids2.shp"
    base = {"geometry": shp, "id": "FIPS", "per": 1000}
    right = load_panel(InputSpec(numerator=r"SID(\d+)", denominator=r"BIR(\d+)", **base))
    assert "rates-over-base" not in _codes(right)
    swapped = load_panel(InputSpec(numerator=r"BIR(\d+)", denominator=r"SID(\d+)", **base))
    msg = _find(swapped, "rates-over-base").message
    # counties with no SIDS death have a zero base (their rate is missing), the rest are over
    assert "the columns look swapped: pass --numerator SID(\\d+) --denominator BIR(\\d+)" in msg


# -- 2. a negative missing-value code ------------------------------------------------------------
def _rates_table(codes: dict[int, float]):
    rows = long_rows(IDS, YEARS)
    for k, v in codes.items():
        rows[k]["rate"] = v
    return rows


def _rate_spec(layer, table, **kw):
    return InputSpec(geometry=layer, table=table, id="unit_id", period="year", value="rate", **kw)


def test_repeated_negative_value_is_named_as_a_missing_code(layer_file, table_file):
    rows = _rates_table({3: -999, 20: -999, 41: -999, 70: -999})
    layer, table = layer_file(n_side=3), table_file(rows, "rates.csv")
    p = load_panel(_rate_spec(layer, table))
    f = _find(p, "values-negative-code")
    assert f.level == "warning" and f.message.startswith("rates.csv: 4 cells of 'rate' hold -999")
    assert "--missing -999" in f.message and "[inputs] missing = [-999]" in f.message
    assert set(f.units) == {"00001", "00003", "00005", "00008"}
    # rows 3, 20, 41, 70 of 9 years per unit: 2018, 2017, 2020, 2022
    assert "periods 2017, 2018, 2020, 2022)" in f.message
    assert "values-negative" not in _codes(p)  # every negative is the code
    # with the code passed, the cells are missing and no negative finding remains
    fixed = load_panel(_rate_spec(layer, table, missing=(-999,)))
    assert {"values-negative-code", "values-negative"}.isdisjoint(_codes(fixed))
    assert "values-missing-code" in _codes(fixed) and np.isnan(fixed.values[0, 3])


def test_other_negatives_keep_the_generic_finding_with_file_and_column(layer_file, table_file):
    rows = _rates_table({3: -9, 20: -9, 41: -9, 70: -2.5})
    p = load_panel(_rate_spec(layer_file(n_side=3), table_file(rows, "rates.csv")))
    assert "3 cells of 'rate' hold -9" in _find(p, "values-negative-code").message
    g = _find(p, "values-negative")
    assert g.message.startswith("rates.csv: 1 cell of 'rate' is negative (-2.5; units 00008)")
    assert g.units == ("00008",)
    # two cells of -999 are too few to call a code: only the generic finding
    p = load_panel(
        _rate_spec(
            layer_file("b.gpkg", n_side=3), table_file(_rates_table({3: -999, 20: -999}), "b.csv")
        )
    )
    assert "values-negative-code" not in _codes(p)
    assert _find(p, "values-negative").message.startswith("b.csv: 2 cells of 'rate' are negative")


def test_missing_code_in_counts_names_the_count_column(layer_file, table_file):
    rows = _counts()
    for k in (2, 11, 50):
        rows[k]["parcels"] = -1
    p = load_panel(_count_spec(layer_file(n_side=3), table_file(rows, "filings.csv")))
    assert "3 cells of 'parcels' hold -1" in _find(p, "values-negative-code").message
    assert "values-negative" not in _codes(p)


def test_negative_checks_alone():
    ids = np.array(["a", "b", "c", "d", "e", "f"], dtype=object)
    x = np.array([1.5, -99, -99, 2, -99, -4])
    fs = _loader.negative_checks(x, ids, where="t.csv", column="rate")
    assert [f.code for f in fs] == ["values-negative-code", "values-negative"]
    assert fs[0].units == ("b", "c", "e") and fs[1].units == ("f",)
    # varied negatives (a column of changes) are not a code
    y = np.array([-1.5, -2.0, -0.5, 3.0, -2.25, 1.0])
    assert [f.code for f in _loader.negative_checks(y, ids, where="t", column="c")] == [
        "values-negative"
    ]


# -- 3. a typo period --------------------------------------------------------------------------
def test_stray_rows_of_a_typo_year_are_named_and_left_out(layer_file, table_file):
    rows = long_rows(IDS, YEARS)
    for k in (1, 10, 19):  # units 00001-00003, 2016 written 2109
        rows[k]["year"] = 2109
    p = load_panel(_rate_spec(layer_file(n_side=3), table_file(rows, "rates.csv")))
    f = _find(p, "periods-outlying")
    assert f.level == "warning"
    assert f.message.startswith("rates.csv column 'year': period 2109 sits 86 years after")
    assert "(2015 to 2023, 1 year apart) in 3 rows (units 00001, 00002, 00003)" in f.message
    assert "left out of the map" in f.message and "correct the period" in f.message
    assert set(f.units) == {"00001", "00002", "00003"}
    # 3 rows among 9 a year would make a last frame of their own ("2015 to 2109" in every
    # headline): they are left out, counted in the warning; the units keep their other years
    assert p.periods == tuple(YEARS) and p.n_units == 9
    assert np.isnan(p.values[:3, 1]).all() and np.isfinite(p.values[3:, 1]).all()
    assert np.isfinite(p.values[:3, [0, *range(2, 9)]]).all()
    # neither 2024..2108 nor anything else is listed as a gap
    assert "periods-gap" not in _codes(p)


def test_missing_year_and_typo_in_a_wide_column(layer_file, table_file):
    wide = pd.DataFrame({"unit_id": IDS})
    for y in [*range(2015, 2023), 2024]:  # 2023 missing: a gap, not an outlier
        wide[f"rate_{y}"] = 1.0
    p = load_panel(
        InputSpec(
            geometry=layer_file(n_side=3),
            table=table_file(wide, "w.csv"),
            id="unit_id",
            columns="rate_*",
        )
    )
    assert "periods-outlying" not in _codes(p) and "2023" in _find(p, "periods-gap").message
    wide["rate_2042"] = 1.0  # 2024 typed 2042: a whole column, so every unit has a row
    p = load_panel(
        InputSpec(
            geometry=layer_file("b.gpkg", n_side=3),
            table=table_file(wide, "w2.csv"),
            id="unit_id",
            columns="rate_*",
        )
    )
    f = _find(p, "periods-outlying")
    assert "period 2042 (column rate_2042) sits 18 years after the others" in f.message
    assert "in 9 rows" in f.message and len(f.units) == 9
    # a whole column of values is a period's data: kept as its own period
    assert "kept as its own period" in f.message and "(rename the column)" in f.message
    assert p.periods[-1] == 2042 and np.isfinite(p.values[:, -1]).all()


def test_mexico_decades_with_a_typo_column():
    # libpysal example 'mexico' (Mexican states' GDP per capita by decade, 1940-2000): as
    # shipped no period is outlying; with the column pcgdp2000 renamed pcgdp2090 (a typo), 2090
    # sits 100 years after 1940-1990 (10 years apart) and is named.
    folder = example_dir("mexico", "mexicojoin.shp", "mexico.csv")
    spec = {"geometry": folder / "mexicojoin.shp", "id": "NAME", "table_id": "State"}
    p = load_panel(InputSpec(table=folder / "mexico.csv", columns="pcgdp*", **spec))
    assert "periods-outlying" not in _codes(p)


def test_mexico_typo_column_is_named(tmp_path: Path):
    folder = example_dir("mexico", "mexicojoin.shp", "mexico.csv")
    typo = tmp_path / "mexico_typo.csv"
    pd.read_csv(folder / "mexico.csv").rename(columns={"pcgdp2000": "pcgdp2090"}).to_csv(
        typo, index=False
    )
    p = load_panel(
        InputSpec(
            geometry=folder / "mexicojoin.shp",
            table=typo,
            id="NAME",
            table_id="State",
            columns="pcgdp*",
        )
    )
    f = _find(p, "periods-outlying")
    assert (
        "period 2090 (column pcgdp2090) sits 100 years after the others (1940 to 1990, 10 years apart)"
        in f.message
    )
    assert p.periods[-1] == 2090


def test_months_with_a_typo_year(layer_file, table_file):
    months = [f"2020-{m:02d}" for m in range(1, 13)]
    rows = [{"unit_id": u, "year": m, "rate": 1.0} for u in IDS for m in months]
    rows[5]["year"] = "2002-06"  # 2020-06 with the digits swapped
    p = load_panel(_rate_spec(layer_file(n_side=3), table_file(rows, "m.csv")))
    f = _find(p, "periods-outlying")
    assert (
        "period 2002-06 sits 211 months before the others (2020-01 to 2020-12, 1 month apart)"
        in f.message
    )


@pytest.mark.parametrize(
    ("periods", "expected"),
    [
        (
            [1915, *range(2015, 2024), 2109],
            (0, 10),
        ),  # a wrong century at one end, a typo at the other
        ([*range(2015, 2024), 2109, 2190], (9, 10)),  # two typos beside each other
        ([*range(2010, 2020)], ()),
        ([1970, 2000, *range(2010, 2020)], ()),  # census years before annual estimates
        ([1984, 1988, 1993], ()),  # too few to judge
    ],
)
def test_outlying_rule(periods, expected):
    assert outlying(periods) == expected


def test_libpysal_panels_raise_none_of_the_new_warnings():
    # libpysal's bundled panels (us_income 1929-2009 yearly, sids2 counts 1974/1979, stl
    # multi-year rates, mexico decades) are real data with none of these defects.
    def folder(name, *files):
        return example_dir(name, *files)

    us = folder("us_income", "us48.shp", "usjoin.csv")
    sids = folder("sids2", "sids2.shp")
    stl = folder("stl", "stl_hom.shp")
    specs = [
        InputSpec(
            geometry=us / "us48.shp", table=us / "usjoin.csv", id="STATE_NAME", table_id="Name"
        ),
        InputSpec(
            geometry=sids / "sids2.shp", id="FIPS", numerator=r"SID(\d+)", denominator=r"BIR(\d+)"
        ),
        InputSpec(geometry=stl / "stl_hom.shp", id="FIPS", columns=r"HR(\d+)"),
    ]
    for spec in specs:
        assert not NEW & _codes(load_panel(spec)), spec.geometry.name


def test_a_cp1252_table_is_named_never_guessed(layer_file, tmp_path):
    # Excel on Windows saves "CSV" as cp1252 (common practice, no source): without --encoding
    # the error points at the byte and line and names the flag; with it the file reads as written
    import pandas as pd

    from mapdrift.errors import ConfigError, InputError
    from mapdrift.panel import InputSpec, load_panel

    layer = layer_file()
    rows = pd.DataFrame(long_rows([f"{i:05d}" for i in range(1, 17)], [2019, 2020, 2021]))
    rows = rows.rename(columns={"rate": "tasa_año"})
    path = tmp_path / "tasas.csv"
    path.write_bytes(rows.to_csv(index=False).encode("cp1252"))
    spec = dict(geometry=layer, table=path, id="unit_id", period="year", value="tasa_año")
    with pytest.raises(InputError) as err:
        load_panel(InputSpec(**spec))
    msg = str(err.value)
    assert "not UTF-8" in msg and "line 1" in msg and "0xf1" in msg
    assert "--encoding cp1252" in msg and "\n" not in msg
    panel = load_panel(InputSpec(**spec, encoding="cp1252"))
    assert panel.n_units == 16 and panel.n_periods == 3
    with pytest.raises(ConfigError, match="not a text encoding"):
        InputSpec(**spec, encoding="klingon")
