"""The command line against hostile files and options: one table, one test.

Each case builds a file and a command line, and expects an exit status and the words the one-line
message must contain (or, for a file that must be read correctly, the estimate of the same rows
analysed through the Python API: an independent reading of the data, by pandas from a clean
comma-separated file). Where it matters the case also checks that nothing half-written is left:
no report directory after a refusal, an existing file left as it was.
"""

import json

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import pscore_strata as ps
from pscore_strata.cli import main
from pscore_strata.datasets import make_scenario

N_ROWS = 300


def frame():
    data = make_scenario("linear", N_ROWS, random_state=1)
    rng = np.random.default_rng(5)
    table = pd.DataFrame({
        "t": np.asarray(data.treatment, dtype=int),
        "s": np.asarray(data.survival, dtype=int),
        "female": rng.integers(0, 2, N_ROWS),
        "y": data.y,
        "x1": data.X[:, 0],
        "x2": data.X[:, 1],
    })  # fmt: skip
    table["site"] = np.arange(N_ROWS) % 4
    return table


ROLES = ["--outcome", "y", "--treatment", "t", "--survival", "s", "--covariates", "x1"]


def reference_effect():
    """The primary (multiply robust) estimate of the clean rows, through the Python API."""
    table = frame()
    y = table["y"].to_numpy(dtype=float)
    fitted = ps.MultiplyRobust().fit(
        table[["x1"]], np.where(table["s"] == 1, y, np.nan),
        treatment=table["t"].to_numpy(), survival=table["s"].to_numpy(),
    )  # fmt: skip
    return fitted.effect_


def lines(table, separator=",", decimal=".", end=""):
    """The table as CSV text; ``end`` is added to every data line (not to the header)."""
    header, *rows = table.to_csv(index=False, sep=separator, decimal=decimal).splitlines()
    return "".join(line + "\n" for line in [header] + [row + end for row in rows])


# -- the files -----------------------------------------------------------------------------------
def comma(tmp):
    path = tmp / "data.csv"
    frame().to_csv(path, index=False)
    return path


def duplicated_header(tmp):
    path = tmp / "dup.csv"
    path.write_text(lines(frame()).replace("x1,x2", "x1,x1", 1))
    return path


def duplicated_parquet(tmp):
    table = frame()
    names = [c if c != "x2" else "x1" for c in table.columns]
    path = tmp / "dup.parquet"
    pq.write_table(pa.Table.from_arrays([pa.array(table[c]) for c in table], names=names), path)
    return path


def text(name, content):
    def make(tmp):
        path = tmp / name
        if isinstance(content, bytes):
            path.write_bytes(content)
        else:
            path.write_text(content(frame()) if callable(content) else content)
        return path

    return make


def latin1(tmp):
    path = tmp / "latin.csv"
    table = frame().assign(town="Montr\xe9al")
    path.write_bytes(lines(table).encode("latin-1"))
    return path


def parquet_as_csv(tmp):
    path = tmp / "binary.csv"
    frame().to_parquet(tmp / "x.parquet")
    path.write_bytes((tmp / "x.parquet").read_bytes())
    return path


def one_cluster(tmp):
    path = tmp / "one.csv"
    frame().assign(site=3).to_csv(path, index=False)
    return path


def one_cluster_left(tmp):
    table = frame().assign(site=3.0)
    table.loc[:5, "site"] = np.nan
    path = tmp / "one_left.csv"
    table.to_csv(path, index=False)
    return path


def small_cell(tmp):
    # Three treated non-survivors: fewer than the boosting learner's default five folds.
    table = frame()
    treated_dead = table.index[(table["t"] == 1) & (table["s"] == 0)]
    table.loc[treated_dead[3:], "s"] = 1
    table.loc[treated_dead[3:], "y"] = 0.0
    path = tmp / "small_cell.csv"
    table.to_csv(path, index=False)
    return path


def constant_treatment(tmp):
    path = tmp / "treated.csv"
    frame().assign(t=1).to_csv(path, index=False)
    return path


def directory(tmp):
    (tmp / "folder.csv").mkdir()
    return tmp / "folder.csv"


def existing(tmp, name="existing.txt"):
    path = tmp / name
    path.write_text("keep me")
    return path


# -- the command lines ---------------------------------------------------------------------------
def analyze(make, *extra, out="report"):
    def argv(tmp):
        return ["analyze", str(make(tmp)), *ROLES, "--quiet", "--out", str(tmp / out), *extra]

    return argv


def out_is(path_of):
    def argv(tmp):
        return ["analyze", str(comma(tmp)), *ROLES, "--quiet", "--out", str(path_of(tmp))]

    return argv


def simulate(*extra, out=lambda tmp: tmp / "sim.csv"):
    return lambda tmp: ["simulate", "linear", "--n", "200", "--out", str(out(tmp)), *extra]


def under_a_file(tmp):
    existing(tmp, "afile")
    return tmp / "afile" / "sub"


CORRECT = "same estimate"
# (id, command line, exit status, words the message must contain or CORRECT)
CASES = [
    ("duplicated CSV header", analyze(duplicated_header), 2,
     ["names a column more than once", "'x1' (columns 5, 6)"]),
    ("duplicated Parquet names", analyze(duplicated_parquet), 2,
     ["names a column more than once", "'x1'"]),
    ("empty file", analyze(text("empty.csv", "")), 2, ["is empty", "header line"]),
    ("blank lines only", analyze(text("blank.csv", "\n\n  \n")), 2, ["is empty"]),
    ("header only", analyze(text("head.csv", "t,s,female,y,x1,x2,site\n")), 2,
     ["no data rows"]),
    ("semicolon header only", analyze(text("semi_head.csv", "t;s;female;y;x1;x2;site\n")), 2,
     ["no data rows"]),
    ("semicolon with decimal commas", analyze(text(
        "semi.csv", lambda f: lines(f, ";", ","))), 0, CORRECT),
    ("colon-separated", analyze(text("colon.csv", lambda f: lines(f, ":"))), 2,
     ["single column", "separator was not recognised", "semicolon"]),
    ("not UTF-8", analyze(latin1), 2, ["not UTF-8", "save it as UTF-8"]),
    ("binary file named .csv", analyze(parquet_as_csv), 2, ["not CSV text"]),
    ("CSV named .parquet", analyze(text("c.parquet", lambda f: lines(f))), 2,
     ["could not be read as parquet"]),
    ("trailing separator on every row", analyze(text(
        "trail.csv", lambda f: lines(f.drop(columns="site"), end=",")), ), 0, CORRECT),
    ("an unnamed extra field on every row", analyze(text(
        "extra.csv", lambda f: lines(f.drop(columns="site"), end=",ok"))), 2,
     ["more field(s) than its header names", "would shift"]),
    ("DATA is a directory", analyze(directory), 2, ["is a directory"]),
    ("DATA absent", analyze(lambda tmp: tmp / "absent.csv"), 2, ["does not exist"]),
    ("DATA .xlsx", analyze(text("book.xlsx", b"PK")), 2, ["type '.xlsx'"]),
    ("--out is an existing file", out_is(existing), 2, ["--out", "is an existing file"]),
    ("--out under a file", out_is(under_a_file), 2, ["--out", "lies under", "is a file"]),
    ("demo --out is an existing file",
     lambda tmp: ["demo", "--quiet", "--out", str(existing(tmp))], 2,
     ["--out", "is an existing file"]),
    ("single cluster", analyze(one_cluster, "--cluster", "site"), 2,
     ["--cluster column 'site'", "single value '3'", "at least two clusters"]),
    ("single cluster after dropping rows", analyze(
        one_cluster_left, "--cluster", "site", "--drop-incomplete"), 2,
     ["--cluster column 'site'", "at least two clusters"]),
    ("--folds above the smallest cell", analyze(comma, "--folds", "300"), 2,
     ["--folds 300", "smallest treatment x survival cell", "pass --folds"]),
    ("boosting's default folds above a cell of 3", analyze(small_cell, "--learner", "boosting"),
     2, ["--learner boosting cross-fits with 5 folds", "--survival '0': 3 row(s)",
         "pass --folds 3"]),
    ("--seed -1", analyze(comma, "--seed", "-1", "--folds", "3"), 2,
     ["--seed must be an integer from 0 to 4294967295"]),
    ("--seed 2**40", analyze(comma, "--seed", str(2**40), "--learner", "boosting"), 2,
     ["--seed must be an integer from 0"]),
    ("--seed abc", analyze(comma, "--seed", "abc"), 2, ["argument --seed", "invalid int"]),
    ("--covariates listed twice", analyze(comma, "--covariates", "x1", "x1"), 2,
     ["--covariates lists 'x1' more than once"]),
    ("treatment all 1", analyze(constant_treatment), 2, ["control arm", "no units"]),
    ("simulate --seed -1", simulate("--seed", "-1"), 2, ["--seed must be an integer from 0"]),
    ("simulate --out a directory named .csv", simulate(out=directory), 2,
     ["--out", "is a directory"]),
    ("simulate --out a directory", simulate(out=lambda tmp: tmp), 2,
     ["must end in .csv or .parquet"]),
    ("simulate --out under a file", simulate(out=lambda tmp: under_a_file(tmp) / "d.csv"), 2,
     ["--out", "lies under"]),
    ("simulate --out an existing file", simulate(out=lambda tmp: existing(tmp, "old.csv")), 0,
     ["(replacing the file there)"]),
]  # fmt: skip


@pytest.fixture(scope="module")
def reference():
    return reference_effect()


@pytest.mark.parametrize(
    "argv, status, expected", [c[1:] for c in CASES], ids=[c[0] for c in CASES]
)
def test_hostile_command_line(tmp_path, capsys, reference, argv, status, expected):
    command = argv(tmp_path)
    before = {p: p.read_bytes() for p in tmp_path.rglob("*") if p.is_file()}
    try:
        code = main(command)
    except SystemExit as stop:  # argparse's own errors
        code = stop.code
    captured = capsys.readouterr()
    assert code == status, captured.err
    if expected == CORRECT:
        results = json.loads((tmp_path / "report" / "results.json").read_text())
        primary = next(r for r in results["estimates"] if r["primary"])
        assert primary["effect"] == pytest.approx(reference, rel=1e-9, abs=1e-12)
        assert results["data_overview"]["n_rows_analyzed"] == N_ROWS
        return
    message = captured.err.strip() if status else captured.out
    for words in expected:
        assert words in message, message
    if status:
        assert len(message.splitlines()) == 1, message
        # A refusal leaves nothing behind: no report directory, every existing file unchanged.
        assert not (tmp_path / "report").exists()
        for path, content in before.items():
            assert path.read_bytes() == content, path
        assert not [p for p in tmp_path.rglob("*.tmp")]
    else:
        out = next(a for a in reversed(command) if a.endswith(".csv"))
        assert len(pd.read_csv(out)) == 200
