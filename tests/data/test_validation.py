"""Every bad-input case: a DataError naming the file (and row/column), CLI exit 2, no traceback.

The files here are small invented inputs (sanity data); what is checked is the contract of
issue 2 and docs/internals.md: the message starts with the file and names the row and column
where known; the CLI prints one ``benchkit: error:`` line and exits with status 2.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from benchkit.cli import main
from benchkit.data import DataError, DataWarning, load

from .conftest import write_entity, write_matrix

GOOD = np.arange(12, dtype=float).reshape(4, 3) / 4


def _split(tmp_path: Path, train=GOOD, test=GOOD, labels=(0, 1, 1, 0)) -> Path:
    root = tmp_path / "sm"
    write_entity(root, "m1", train, test, labels)
    return root


def _write(path: Path, text: str) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text)
    return path


def case_missing_source(tmp_path):
    p = tmp_path / "nothing-here"
    return p, [f"{p}: no such file or folder"]


def case_missing_subfolder(tmp_path):
    root = _split(tmp_path)
    for f in (root / "test_label").iterdir():
        f.unlink()
    (root / "test_label").rmdir()
    return root, [f"{root / 'test_label'}: no such folder"]


def case_entity_missing_from_a_folder(tmp_path):
    root = _split(tmp_path)
    write_matrix(root / "train" / "m2.txt", GOOD)
    write_matrix(root / "test" / "m2.txt", GOOD)
    return root, [f"{root / 'test_label' / 'm2.txt'}: missing", "train/m2.txt and test/m2.txt"]


def case_missing_table(tmp_path):
    p = tmp_path / "absent.csv"
    return p, [f"{p}: no such file or folder"]


def case_label_not_binary(tmp_path):
    root = _split(tmp_path, labels=(0, 1, 2, 0))
    return root, [f"{root / 'test_label' / 'm1.txt'}: row 3: label must be 0 or 1, got 2"]


def case_label_length(tmp_path):
    root = _split(tmp_path, labels=(0, 1, 0))
    return root, [
        f"{root / 'test_label' / 'm1.txt'}: 3 labels",
        f"{root / 'test' / 'm1.txt'} has 4",
    ]


def case_channel_count(tmp_path):
    root = _split(tmp_path, test=GOOD[:, :2])
    return root, [f"{root / 'test' / 'm1.txt'}: 2 channels", "has 3"]


def case_entities_disagree_on_channels(tmp_path):
    root = _split(tmp_path)
    write_entity(root, "m2", GOOD[:, :2], GOOD[:, :2], (0, 0, 1, 0))
    return root, [f"{root / 'train' / 'm2.txt'}: 2 channels, the first entity has 3"]


def case_parquet_non_numeric(tmp_path):
    p = tmp_path / "node.parquet"
    pd.DataFrame({"cpu": ["1", "2", "x", "4"], "label": [0, 0, 1, 0]}).to_parquet(p)
    # Parquet rows are records numbered from 1 (there is no header line)
    return p, [f"{p}: row 3, column 'cpu': not a number ('x')"]


def case_parquet_booleans(tmp_path):
    p = tmp_path / "node.parquet"
    pd.DataFrame({"up": [True, False, True], "label": [0, 0, 1]}).to_parquet(p)
    return p, [f"{p}: column 'up': true/false values, expected numbers"]


def case_npz_missing_array(tmp_path):
    p = tmp_path / "one.npz"
    np.savez(p, train=GOOD, test=GOOD)
    return p, [f"{p}: no array 'labels'"]


def case_npz_nan(tmp_path):
    p = tmp_path / "one.npz"
    test = GOOD.copy()
    test[2, 1] = np.nan
    np.savez(p, train=GOOD, test=test, labels=np.zeros(4))
    return p, [f"{p}: test[2, 1]: missing value"]


def case_npz_object_array(tmp_path):
    p = tmp_path / "one.npz"
    np.savez(p, train=np.array([[1, "a"]], dtype=object), test=GOOD, labels=np.zeros(4))
    return p, [f"{p}: holds object arrays"]


# (case, file to write: inside a good split folder, or on its own; its text; the message after
# "<file>: "). Rows count lines of the file (a header line is row 1).
TEXT_CASES = [
    ("empty_file", "sm/test/m1.txt", "", "empty file"),
    ("header_only_csv", "node.csv", "cpu,mem,label\n", "empty file"),
    (
        "ragged_long_row",
        "sm/train/m1.txt",
        "1,2,3\n4,5,6\n7,8,9,10\n",
        "row 3: 4 fields, but row 1 has 3",
    ),
    (
        "ragged_short_row",
        "sm/test/m1.txt",
        "1,2,3\n4,5,6\n7,8\n1,2,3\n",
        "row 3: 2 fields, but row 1 has 3",
    ),
    ("blank_line_between_rows", "sm/train/m1.txt", "1,2,3\n\n4,5,6\n", "row 2: empty line"),
    (
        "non_numeric_headerless",
        "sm/train/m1.txt",
        "1,2,3\n4,abc,6\n",
        "row 2, column 2: not a number ('abc')",
    ),
    (
        "non_numeric_csv",
        "node.csv",
        "cpu,mem,label\n1,2,0\n3,4,0\n5,x7,1\n",
        "row 4, column 'mem': not a number ('x7')",
    ),
    (
        "nan_cell",
        "sm/test/m1.txt",
        "1,2,3\n4,5,6\n7,nan,9\n1,2,3\n",
        "row 3, column 2: missing value",
    ),
    (
        "empty_cell",
        "node.csv",
        "cpu,mem,label\n1,2,0\n3,,0\n",
        "row 3, column 'mem': missing value",
    ),
    ("inf_cell", "sm/train/m1.txt", "1,2,3\n4,5,inf\n", "row 2, column 3: not finite (inf)"),
    (
        "label_not_binary_csv",
        "node.csv",
        "cpu,label\n1,0\n2,0\n3,0\n4,-1\n",
        "row 5: label must be 0 or 1, got -1",
    ),
    (
        "duplicate_timestamp",
        "node.csv",
        "timestamp,cpu,label\n2024-01-01 00:00,1,0\n2024-01-01 00:05,2,0\n2024-01-01 00:05,3,0\n",
        "row 4: duplicate timestamp 2024-01-01 00:05:00",
    ),
    (
        "unsorted_timestamp",
        "node.csv",
        "timestamp,cpu,label\n10,1,0\n20,2,0\n15,3,0\n",
        "row 4: timestamps not sorted",
    ),
    (
        "bad_timestamp",
        "node.csv",
        "timestamp,cpu,label\n2024-01-01,1,0\nsoon,2,0\n",
        "row 3, column 'timestamp': not a timestamp ('soon')",
    ),
    ("no_label_column", "node.csv", "cpu,mem\n1,2\n3,4\n", "no label column 'label'"),
    (
        "duplicate_column",
        "node.csv",
        "cpu,cpu,label\n1,2,0\n",
        "row 1: column name 'cpu' appears twice",
    ),
    ("npz_not_a_zip", "one.npz", "junk", "not a readable .npz archive (not a zip file)"),
    ("parquet_damaged", "node.parquet", "junk", "not a readable Parquet file"),
    ("unknown_format", "data.xlsx", "x", "unknown dataset format"),
    ("toml_unknown_key", "d.toml", 'format = "demo"\nseeds = 3\n', "unknown key 'seeds'"),
    ("toml_syntax", "d.toml", 'format = "demo\n', "not valid TOML"),
    (
        "toml_bad_option",
        "d.toml",
        'format = "split-folder"\npath = "x"\n[options]\nfill = 1\n',
        "options: unknown option 'fill'",
    ),
]


def _text_case(where: str, text: str, expected: str):
    def case(tmp_path):
        if where.startswith("sm/"):
            source = _split(tmp_path)
        else:
            source = tmp_path / where
        path = _write(tmp_path / where, text)
        return source, [f"{path}: {expected}"]

    return case


CASES = [v for k, v in sorted(globals().items()) if k.startswith("case_")]
IDS = [c.__name__[5:] for c in CASES] + [t[0] for t in TEXT_CASES]
CASES += [_text_case(*t[1:]) for t in TEXT_CASES]


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_load_raises_data_error_naming_the_place(case, tmp_path):
    source, fragments = case(tmp_path)
    with pytest.raises(DataError) as info:
        load(str(source))
    message = str(info.value)
    assert message.startswith(str(source)) or message.startswith(str(tmp_path))
    for fragment in fragments:
        assert fragment in message
    assert "\n" not in message


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_cli_prints_one_line_and_exits_2(case, tmp_path, capsys):
    source, fragments = case(tmp_path)
    status = main(["datasets", "show", str(source)])
    out, err = capsys.readouterr()
    assert status == 2
    assert out == ""
    assert err.count("\n") == 1 and err.startswith("benchkit: error: ")
    assert "Traceback" not in err
    assert fragments[0] in err


def test_cli_subprocess_exit_status_2_without_traceback(tmp_path):
    source, fragments = CASES[IDS.index("non_numeric_csv")](tmp_path)
    exe = Path(sys.executable).with_name("benchkit")
    proc = subprocess.run(
        [str(exe), "datasets", "show", str(source)], capture_output=True, text=True, check=False
    )
    assert proc.returncode == 2
    assert proc.stdout == ""
    assert proc.stderr == f"benchkit: error: {fragments[0]}\n"


def test_nothing_is_parsed_wrong_when_fields_are_missing_at_the_end(tmp_path):
    # pandas silently pads a short row with NaN; we must report it as ragged, also under ffill
    root = _split(tmp_path)
    _write(root / "test" / "m1.txt", "1,2,3\n4,5,6\n7,8\n1,2,3\n")
    with pytest.raises(DataError, match="row 3: 2 fields"):
        load(str(root), missing="ffill")


def test_trailing_blank_lines_are_not_rows(tmp_path):
    root = _split(tmp_path)
    _write(root / "test" / "m1.txt", "1,2,3\n4,5,6\n7,8,9\n1,2,3\n\n\n")
    test = load(str(root)).entities[0].test
    np.testing.assert_array_equal(test, [[1, 2, 3], [4, 5, 6], [7, 8, 9], [1, 2, 3]])


def test_ffill_fills_like_pandas_and_reports_the_count(tmp_path):
    train = np.array([[np.nan, 1.0], [2.0, np.inf], [np.nan, 3.0], [4.0, np.nan], [5.0, 6.0]])
    root = tmp_path / "sm"
    write_entity(root, "m1", train, GOOD[:, :2], (0, 0, 0, 1))
    with pytest.warns(DataWarning, match=r"m1.txt: filled 4 missing or non-finite cell"):
        dataset = load(str(root), missing="ffill")
    # reference: pandas DataFrame.ffill then .bfill for the leading gap (inf counted as missing)
    expected = pd.DataFrame(train).replace(np.inf, np.nan).ffill().bfill().to_numpy()
    np.testing.assert_array_equal(dataset.entities[0].train, expected)
    assert dataset.notes["filled_cells"] == {"m1": 4}


def test_ffill_cannot_fill_an_all_missing_column(tmp_path):
    p = _write(tmp_path / "node.csv", "cpu,mem,label\n1,,0\n2,,0\n3,,1\n4,,0\n")
    with pytest.raises(DataError, match=r"node.csv: column 'mem': no finite value"):
        load(str(p), missing="ffill")


def test_unknown_missing_policy(tmp_path):
    with pytest.raises(DataError, match="option missing must be one of 'error', 'ffill'"):
        load(str(_split(tmp_path)), missing="zero")


def test_unknown_loader_option_names_the_source(tmp_path):
    root = _split(tmp_path)
    with pytest.raises(DataError, match=f"{root}: unknown option 'label_column'"):
        load(str(root), label_column="y")


def test_constant_channel_warns_and_is_kept(tmp_path):
    train = GOOD.copy()
    train[:, 1] = 7.0
    root = tmp_path / "sm"
    write_entity(root, "m1", train, GOOD, (0, 0, 0, 1))
    with pytest.warns(DataWarning, match=r"train/m1.txt: constant channel\(s\) in train: 'c02'"):
        dataset = load(str(root))
    assert dataset.entities[0].train.shape == (4, 3)
    assert dataset.notes["constant_channels"] == {"m1": ["c02"]}


def test_cli_shows_constant_channel_warning_as_one_line(tmp_path, capsys):
    train = GOOD.copy()
    train[:, 0] = 1.5
    root = tmp_path / "sm"
    write_entity(root, "m1", train, GOOD, (0, 0, 0, 1))
    assert main(["datasets", "show", str(root)]) == 0
    out, err = capsys.readouterr()
    assert err.startswith("benchkit: warning: ") and err.count("\n") == 1
    assert "'c01'" in err and "m1" in out


def test_run_shows_data_warnings_as_one_line_each(tmp_path, capsys):
    rng = np.random.default_rng(0)
    train, test = rng.normal(size=(60, 3)), rng.normal(size=(40, 3))
    train[:, 2] = 0.5
    write_entity(tmp_path / "sm", "m1", train, test, (np.arange(40) % 13 == 5).astype(int))
    spec = tmp_path / "tiny.toml"
    spec.write_text(
        'name = "tiny"\n[[datasets]]\nsource = "sm"\n[[detectors]]\nname = "random"\n'
    )
    assert main(["run", str(spec), "--out", str(tmp_path / "out"), "--quiet"]) == 0
    err = capsys.readouterr().err
    lines = [line for line in err.splitlines() if "constant channel" in line]
    assert len(lines) == 1 and lines[0].startswith("benchkit: warning: ")
    assert "DataWarning" not in err


def test_demo_option_errors_exit_2(capsys):
    assert main(["datasets", "show", "demo", "-o", "n_channels=30"]) == 2
    err = capsys.readouterr().err
    assert err == "benchkit: error: demo: option n_channels must be an integer in [4, 20], got 30\n"


def test_env_var_data_root_missing_is_a_clear_error(tmp_path, monkeypatch):
    monkeypatch.delenv("BENCHKIT_DATA_ROOT", raising=False)
    toml = Path(__file__).resolve().parents[2] / "datasets" / "server-machines.toml"
    with pytest.raises(DataError, match="pass --data-root DIR .* or set BENCHKIT_DATA_ROOT"):
        load(str(toml))
    monkeypatch.setenv("BENCHKIT_DATA_ROOT", str(tmp_path))
    with pytest.raises(DataError, match=r"server-machines.toml: path .* does not exist"):
        load(str(toml))


def test_export_demo_refuses_a_non_empty_folder(tmp_path, capsys):
    target = tmp_path / "out"
    _write(target / "keep.txt", "mine")
    assert main(["datasets", "export-demo", str(target)]) == 2
    assert f"{target}: already exists" in capsys.readouterr().err
    assert sorted(os.listdir(tmp_path)) == ["out"] and os.listdir(target) == ["keep.txt"]
