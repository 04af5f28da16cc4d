"""Views of trending values (relative, indexed, deflated) and the common-trend finding.

Reference data: libpysal's bundled us_income example (per capita income of the 48 contiguous US
states, 1929-2009, US Bureau of Economic Analysis). Expected values are computed here with
pandas/numpy straight from ``usjoin.csv``, and the pooled classes with mapclassify.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from mapdrift.errors import ConfigError, InputError
from mapdrift.panel import InputSpec, load_panel
from mapdrift.views import View, apply_view, common_trend, parse_view, resolve_view
from pysal_examples import us_income

YEARS = [str(y) for y in range(1929, 2010)]


@pytest.fixture(scope="module")
def income():
    """The us_income panel loaded with flags only (no reshaping) and the raw CSV as pandas reads
    it, rows in the panel's unit order."""
    d = us_income()
    spec = InputSpec(
        geometry=d / "us48.shp",
        table=d / "usjoin.csv",
        id="STATE_FIPS",
        name="STATE_NAME",
        crs="EPSG:4326",
    )
    panel = load_panel(spec)
    raw = pd.read_csv(d / "usjoin.csv")
    raw.index = raw["STATE_FIPS"].map(lambda x: f"{x:02d}")
    return spec, panel, raw.loc[list(panel.units), YEARS].to_numpy(dtype=float)


def test_parse_view_forms_and_errors(tmp_path):
    assert parse_view(None).is_raw and parse_view("raw").is_raw
    assert parse_view("relative-median") == View("relative", "median")
    assert parse_view("relative-mean") == View("relative", "mean")
    assert parse_view("index:2015") == View("index", base="2015")
    v = parse_view("deflate:data/cpi.csv:cpi_u@2009")
    assert (str(v.file), v.column, v.base) == ("data/cpi.csv", "cpi_u", "2009")
    assert parse_view("deflate:cpi") == View("deflate", column="cpi")
    assert str(parse_view("deflate:cpi.xlsx")) == "deflate:cpi.xlsx"
    for bad in ("relative-mode", "index:", "deflate:", "deflate:cpi.dbf", "scale:2"):
        with pytest.raises(ConfigError, match="is not a valid view"):
            parse_view(bad)
    # a config's deflator file is relative to the config's folder
    assert resolve_view("deflate:cpi.csv", tmp_path) == f"deflate:{tmp_path / 'cpi.csv'}"
    assert resolve_view("index:2015", tmp_path) == "index:2015"


def test_relative_views_match_numpy_and_the_changes_command(income):
    from mapdrift.changes import relative_panel

    _, panel, raw = income
    for how, centre in (("median", np.median(raw, axis=0)), ("mean", raw.mean(axis=0))):
        view = apply_view(panel, f"relative-{how}")
        np.testing.assert_allclose(view.values, raw / centre, rtol=1e-12)
        # the same numbers as `changes --relative` (one definition of "relative")
        np.testing.assert_allclose(view.values, relative_panel(panel, how).values, rtol=1e-12)
        assert view.meta.view.startswith(f"view: values divided by each period's {how}")
        assert view.meta.unit_label == f"x the period {how}"
        assert view.findings[-1].code == "relative-values"


def test_index_view_divides_by_each_units_base_value(income):
    _, panel, raw = income
    view = apply_view(panel, "index:1950")
    np.testing.assert_allclose(view.values, raw / raw[:, [1950 - 1929]], rtol=1e-12)
    assert np.allclose(view.values[:, 1950 - 1929], 1.0)
    assert view.meta.variable.endswith("indexed to 1950")
    assert view.findings[-1].code == "view-indexed"
    with pytest.raises(ConfigError, match="period '1900' is not in the data"):
        apply_view(panel, "index:1900")


def test_index_view_names_units_without_a_base_value(income):
    _, panel, raw = income
    values = raw.copy()
    values[:2, 0] = np.nan  # two states without a 1929 value
    view = apply_view(panel.with_values(values), "index:1929")
    assert np.isnan(view.values[:2]).all() and np.isfinite(view.values[2:]).all()
    f = view.findings[-1]
    assert f.code == "view-index-base-missing" and f.units == panel.units[:2]


def test_deflate_by_a_factor_table_and_by_a_long_tables_column(income, tmp_path):
    spec, panel, raw = income
    # a per-period factor: the period mean (pandas); deflating by it to 2009 terms must equal
    # the relative-mean view times the 2009 mean
    mean = raw.mean(axis=0)
    pd.DataFrame({"year": YEARS, "factor": mean}).to_csv(tmp_path / "factor.csv", index=False)
    view = apply_view(panel, f"deflate:{tmp_path / 'factor.csv'}")
    np.testing.assert_allclose(view.values, raw / mean * mean[-1], rtol=1e-9)
    assert view.meta.variable.endswith("in 2009 terms")
    assert "factor from factor.csv" in view.meta.view
    based = apply_view(panel, f"deflate:{tmp_path / 'factor.csv'}:factor@1929")
    np.testing.assert_allclose(based.values, raw / mean * mean[0], rtol=1e-9)

    # the factor as a column of a long values table (one value per period, repeated per row)
    long = pd.read_csv(spec.table).melt(
        id_vars=["Name", "STATE_FIPS"], value_vars=YEARS, var_name="year", value_name="income"
    )
    long["cpi"] = long["year"].map(dict(zip(YEARS, mean)))
    long.to_csv(tmp_path / "long.csv", index=False)
    lspec = InputSpec(
        geometry=spec.geometry,
        table=tmp_path / "long.csv",
        id="STATE_FIPS",
        period="year",
        value="income",
        crs="EPSG:4326",
        view="deflate:cpi",
    )
    lpanel = apply_view(load_panel(lspec), lspec.view, spec=lspec)
    np.testing.assert_allclose(lpanel.values, raw / mean * mean[-1], rtol=1e-9)


def test_deflator_problems_are_clear_errors(income, tmp_path):
    _, panel, raw = income
    short = tmp_path / "short.csv"
    pd.DataFrame({"year": YEARS[:-2], "cpi": np.arange(79) + 1.0}).to_csv(short, index=False)
    with pytest.raises(InputError, match=r"no value for 2 periods of the data \(2008, 2009\)"):
        apply_view(panel, f"deflate:{short}")
    two = tmp_path / "two.csv"
    pd.DataFrame({"year": YEARS, "a": 1.0, "b": 2.0}).to_csv(two, index=False)
    with pytest.raises(InputError, match="which column is the deflator.*deflate:two.csv:a"):
        apply_view(panel, f"deflate:{two}")
    zero = tmp_path / "zero.csv"
    pd.DataFrame({"year": YEARS, "cpi": [0.0] + [1.0] * 80}).to_csv(zero, index=False)
    with pytest.raises(InputError, match="must be positive; it is not in 1929"):
        apply_view(panel, f"deflate:{zero}")
    with pytest.raises(ConfigError, match="needs a long values table"):
        apply_view(panel, "deflate:cpi")


def test_common_trend_found_on_us_income_and_gone_in_the_relative_view(income):
    import mapclassify

    from mapdrift.breaks import classify_spec
    from mapdrift.config import ClassSpec

    _, panel, raw = income
    cls = classify_spec(panel, ClassSpec())  # pooled quantiles, k = 5
    # mapclassify's pooled quintiles put all 48 states in one class in 1969 and in the top
    # class from 2000 on (the behaviour the finding must catch)
    bins = mapclassify.Quantiles(raw.ravel(), k=5).bins
    ref = np.digitize(raw, bins, right=True)
    assert np.bincount(ref[:, 1969 - 1929]).max() == 48
    assert (ref[:, 2000 - 1929 :] == 4).all()
    np.testing.assert_array_equal(cls.codes, ref)
    f = common_trend(panel, cls.codes, k=cls.k)
    assert f is not None and f.code == "values-common-trend" and f.level == "warning"
    assert "the top class in 1997-2009" in f.message
    assert "--view relative-median" in f.message and "--view index:1929" in f.message
    rel = apply_view(panel, "relative-median")
    rel_cls = classify_spec(rel, ClassSpec())
    assert common_trend(rel, rel_cls.codes, k=rel_cls.k, view="relative-median") is None
    # the values alone (no classes, as in the clusters command) show the trend too
    assert common_trend(panel) is not None


def test_common_trend_quiet_on_the_demo_county():
    from conftest import DEMO
    from mapdrift.breaks import classify_spec
    from mapdrift.config import ClassSpec, load_config

    cfg = load_config(DEMO / "demo.toml")
    panel = load_panel(InputSpec(**cfg.section("inputs")))
    cls = classify_spec(panel, ClassSpec(**cfg.section("classes")))
    assert common_trend(panel, cls.codes, k=cls.k) is None


def test_a_bad_view_in_a_config_stops_when_the_config_is_read(tmp_path):
    from mapdrift.config import load_config

    path = tmp_path / "bad.toml"
    path.write_text('[inputs]\ngeometry = "x.gpkg"\nview = "relativ"\n', encoding="utf-8")
    with pytest.raises(ConfigError, match=r"bad.toml: \[inputs\] --view 'relativ' is not a valid"):
        load_config(path)
