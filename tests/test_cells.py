"""CSV dialects decided per file from evidence: separator, decimal mark, thousands mark.

The files are our own, written by the tests. The conventions checked are common practice, no
source: continental European CSV exports separate fields with ``;`` because ``,`` is their
decimal mark (5,449 = 5.449), and group thousands with ``.`` (1.234,5 = 1234.5); English-language
exports group thousands with ``,`` (1,234.5).
"""

from __future__ import annotations

import numpy as np
import pytest

from mapdrift.cells import read_table, sniff_separator, to_numbers
from mapdrift.errors import ConfigError, InputError
from mapdrift.panel import InputSpec, load_panel

IDS = [f"{i + 1:05d}" for i in range(4)]


def _codes(panel):
    return {f.code: f for f in panel.findings}


def _csv(table_file, rows, sep=";", name="values.csv", header=("unit_id", "year", "rate")):
    text = sep.join(header) + "\n" + "".join(sep.join(r) + "\n" for r in rows)
    return table_file(text, name)


def _spec(layer, table, **kw):
    return InputSpec(geometry=layer, table=table, id="unit_id", period="year", value="rate", **kw)


def test_semicolon_file_with_decimal_commas_reads_true_values(layer_file, table_file):
    # 5,449 is five point four four nine in a ;-separated export, never 5449.
    values = ["5,449", "12,3", "22,025", "7,5"]
    rows = [(u, "2020", v) for u, v in zip(IDS, values)]
    p = load_panel(_spec(layer_file(n_side=2), _csv(table_file, rows)))
    np.testing.assert_allclose(p.values[:, 0], [5.449, 12.3, 22.025, 7.5])
    assert "values-decimal-comma" in _codes(p)


def test_dot_thousands_with_decimal_comma(layer_file, table_file):
    rows = [(u, "2020", v) for u, v in zip(IDS, ["1.234,5", "2.000,25", "999,5", "12"])]
    p = load_panel(_spec(layer_file(n_side=2), _csv(table_file, rows)))
    np.testing.assert_allclose(p.values[:, 0], [1234.5, 2000.25, 999.5, 12.0])
    assert "2 cells" in _codes(p)["values-thousands-separators"].message


def test_comma_thousands_reported(layer_file, table_file):
    csv = 'unit_id,year,rate\n00001,2020,"1,988"\n00002,2020,"12,345.5"\n00003,2020,7.25\n00004,2020,3\n'
    p = load_panel(_spec(layer_file(n_side=2), table_file(csv)))
    np.testing.assert_allclose(p.values[:, 0], [1988, 12345.5, 7.25, 3])
    f = _codes(p)["values-thousands-separators"]
    assert "2 cells" in f.message and "1,988" in f.message


def test_ambiguous_column_stops_and_asks(layer_file, table_file):
    # every comma cell has 3 digits after the comma: thousands or decimals, nothing decides
    rows = [(u, "2020", v) for u, v in zip(IDS, ["1,234", "5,449", "12", "7,010"])]
    layer, table = layer_file(n_side=2), _csv(table_file, rows)
    with pytest.raises(InputError) as err:
        load_panel(_spec(layer, table))
    msg = str(err.value)
    assert "\n" not in msg
    for part in ("values.csv", "'rate'", "1,234", "--decimal ,", "--decimal .", "[inputs] decimal"):
        assert part in msg
    # the answer, as a flag (or the config key: the same InputSpec field)
    p = load_panel(_spec(layer, table, decimal=","))
    np.testing.assert_allclose(p.values[:, 0], [1.234, 5.449, 12, 7.010])
    p = load_panel(_spec(layer, table, decimal="."))
    np.testing.assert_allclose(p.values[:, 0], [1234, 5449, 12, 7010])


def test_dot_groups_in_a_semicolon_file_ask_too(layer_file, table_file):
    rows = [(u, "2020", v) for u, v in zip(IDS, ["1.234", "5.449", "12", "7.010"])]
    with pytest.raises(InputError, match=r"read either way.*--decimal \."):
        load_panel(_spec(layer_file(n_side=2), _csv(table_file, rows)))
    # the same cells in a comma-separated file are ordinary decimals
    p = load_panel(
        _spec(layer_file("b.gpkg", n_side=2), _csv(table_file, rows, sep=",", name="b.csv"))
    )
    np.testing.assert_allclose(p.values[:, 0], [1.234, 5.449, 12, 7.010])


def test_mixed_decimal_marks_stop(layer_file, table_file):
    rows = [(u, "2020", v) for u, v in zip(IDS, ["5,4", "5.4", "3", "2"])]
    with pytest.raises(InputError, match=r"decimal commas .*decimal points.*--decimal"):
        load_panel(_spec(layer_file(n_side=2), _csv(table_file, rows)))


def test_underscore_numbers_rejected(layer_file, table_file):
    csv = "unit_id,year,rate\n00001,2020,1_000\n00002,2020,5\n00003,2020,6\n00004,2020,7\n"
    with pytest.raises(InputError, match=r"'rate' written with underscores \(1_000\)"):
        load_panel(_spec(layer_file(n_side=2), table_file(csv)))


def test_per_zero_and_bad_decimal_rejected(layer_file, table_file):
    with pytest.raises(ConfigError, match=r"per = 0.*positive"):
        InputSpec(geometry="x.gpkg", per=0)
    with pytest.raises(ConfigError, match=r"decimal = ';'"):
        InputSpec(geometry="x.gpkg", decimal=";")


def test_decimal_flag_and_config_key_through_the_cli(runner, layer_file, table_file, tmp_path):
    from mapdrift.cli import app

    rows = [(u, "2020", v) for u, v in zip(IDS, ["1,234", "5,449", "12", "7,010"])]
    layer, table = layer_file(n_side=2), _csv(table_file, rows)
    args = [
        "check",
        str(layer),
        str(table),
        "--id",
        "unit_id",
        "--period",
        "year",
        "--value",
        "rate",
    ]
    res = runner.invoke(app, args)
    assert res.exit_code != 0 and "--decimal ," in res.output
    res = runner.invoke(app, [*args, "--decimal", ","])
    assert res.exit_code == 0, res.output
    cfg = tmp_path / "c.toml"
    cfg.write_text('[inputs]\ndecimal = ","\n', encoding="utf-8")
    res = runner.invoke(app, [*args, "--config", str(cfg)])
    assert res.exit_code == 0, res.output


def test_separator_sniffed_from_a_sample():
    assert sniff_separator("a;b;c\n1,5;2;3\n") == ";"
    assert sniff_separator("a\tb\n1,5\t2\n") == "\t"
    assert sniff_separator('a,b\n"x;y",2\n') == ","
    assert sniff_separator("a|b\n1|2\n") == "|"


def test_read_table_keeps_text_and_the_separator(table_file):
    t = table_file("unit_id;rate\n007;5,5\n", "s.csv")
    df = read_table(t)
    assert df["unit_id"].tolist() == ["007"] and df.attrs["sep"] == ";"


def test_to_numbers_counts_each_marker():
    v, f = to_numbers(
        np.array(["1", "(D)", "(D)", "", "n/a", "2.5"], dtype=object), where="t.csv", column="rate"
    )
    np.testing.assert_array_equal(np.isnan(v), [False, True, True, True, True, False])
    assert "'(D)' x2" in f[0].message and "'(blank)' x1" in f[0].message
