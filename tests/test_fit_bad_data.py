"""`biasbridge fit` refuses data it cannot use: exit 2, FILE:ROW:COL (or the column named), never a
traceback, the input untouched."""

from __future__ import annotations

import hashlib

import pytest

from bridge.cli import main

GOOD_ROWS = "1.0,1.0,0.1e-3\n1.5,1.0,0.5e-3\n2.0,1.0,1.2e-3\n2.5,1.0,2.1e-3\n3.0,1.0,3.3e-3\n3.5,1.0,4.4e-3\n"

# (file text, the located place "ROW:COL" or None, a fragment of the message)
CASES = {
    "too_few_points": ("vgs,vds,id\n1,1,1e-4\n2,1,1e-3\n3,1,3e-3\n", "4:1", "3 data rows: a fit needs at least 5"),
    "nan_cell": ("vgs,vds,id\n" + GOOD_ROWS + "4.0,nan,5e-3\n", "8:5", "`nan` in column `vds` is not a finite number"),
    "non_numeric_cell": ("vgs,vds,id\n" + GOOD_ROWS + "4.0,1.0,5mA\n", "8:9", "`5mA` in column `id` is not a number"),
    "all_currents_zero": ("vgs,vds,id\n" + "".join(f"{v},1,0\n" for v in range(6)), "1:9",
                          "every current in column `id` is zero"),
    "required_column_missing": ("vgs,id\n" + "".join(f"{v},1e-3\n" for v in range(6)), "1:1",
                                "required column `vds` is missing"),
    "pmos_data_as_nmos": ("vgs,vds,id\n" + "".join(f"-{v},-1,-{v}e-3\n" for v in range(1, 7)), "2:7",
                          "PMOS data given as nmos"),
    "wrong_cell_count": ("vgs,vds,id\n" + GOOD_ROWS + "4.0,1.0\n", "8:1", "2 cells where the header has 3"),
    "unknown_unit": ("vgs,vds,id (furlong)\n" + GOOD_ROWS, "1:9", "unit `furlong` is not one of"),
    "duplicate_column": ("vgs,vds,id,VDS\n" + GOOD_ROWS, "1:12", "column `vds` is given twice"),
    "empty_file": ("# only a comment\n", "1:1", "no header line"),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_bad_data_is_refused_at_its_place(case, tmp_path, capsys):
    text, place, fragment = CASES[case]
    path = tmp_path / f"{case}.csv"
    path.write_text(text)
    before = hashlib.sha256(path.read_bytes()).hexdigest()
    assert main(["fit", str(path)]) == 2
    err = capsys.readouterr().err
    assert f"{path}:{place}: " in err, err
    assert fragment in err
    assert "Traceback" not in err
    assert hashlib.sha256(path.read_bytes()).hexdigest() == before


def test_too_few_points_above_the_floor_is_refused(tmp_path, capsys):
    path = tmp_path / "floor.csv"
    path.write_text("vgs,vds,id\n" + GOOD_ROWS)
    assert main(["fit", str(path), "--floor", "4m"]) == 2
    err = capsys.readouterr().err
    assert "1 points carry at least the floor of 0.004 A" in err and str(path) in err


def test_missing_file_is_refused(tmp_path, capsys):
    assert main(["fit", str(tmp_path / "absent.csv")]) == 2
    assert "cannot read the file" in capsys.readouterr().err


@pytest.mark.parametrize(
    ("argv", "fragment"),
    [
        (["--point", "2,2m"], "exactly twice, not 1 times"),
        (["--point", "2,2m", "--point", "2,8m"], "the same VGS"),
        (["--point", "2,8m", "--point", "3,2m"], "the current must rise with VGS"),
        (["--point", "2;2m", "--point", "3,8m"], "is not VGS,ID"),
        ([], "fit takes one of"),
        (["--point", "2,2m", "--point", "3,8m", "--w", "0"], "W must be positive"),
    ],
)
def test_bad_datasheet_points_are_refused(argv, fragment, capsys):
    assert main(["fit", *argv]) == 2
    err = capsys.readouterr().err
    assert fragment in err and "Traceback" not in err
