"""Tables as written by ``write_csv``: booleans as true/false, read back as booleans."""

from __future__ import annotations

import pandas as pd

from mapdrift.outputs import read_csv, write_csv


def test_booleans_written_lower_case_blanks_kept(tmp_path):
    # README's outputs table says true / false; pandas' own default is True / False
    df = pd.DataFrame(
        {
            "unit": ["a", "b", "c"],
            "spike": [True, False, True],  # bool dtype
            "credible": pd.array([True, None, False], dtype="boolean"),  # nullable
            "joined": [True, None, False],  # object with a blank
            "label": ["True story", "x", "y"],  # text stays as written
            "n": [1, 0, 1],  # integers are not booleans
        }
    )
    path = write_csv(df, tmp_path / "t.csv")
    lines = path.read_text(encoding="utf-8").splitlines()
    assert lines[1:] == ["a,true,true,true,True story,1", "b,false,,,x,0", "c,true,false,false,y,1"]
    back = read_csv(path)
    assert back["spike"].tolist() == [True, False, True]
