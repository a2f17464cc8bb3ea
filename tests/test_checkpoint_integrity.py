"""Checkpoint integrity of run_study: every damaged, mixed or foreign checkpoint is refused.

Each case damages a checkpoint directory the way a user or a crash could, reruns the study and
expects either the exact result of an uninterrupted run (the reference: the same study without a
checkpoint) or a ValueError naming the file and what to delete. After the named file is deleted,
the rerun must again equal the uninterrupted run.
"""

import json
import shutil

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from scipy import stats
from sklearn.base import BaseEstimator
from sklearn.utils import Bunch

from pscore_strata.simulation import run_study


class MeanDifference(BaseEstimator):
    """Survivor-only difference in means with the Welch standard error (nobody dies here)."""

    def __init__(self, *, shift=0.0, random_state=None):
        self.shift = shift
        self.random_state = random_state

    def fit(self, X, y, *, treatment, survival, groups=None):
        y1, y0 = y[treatment == 1], y[treatment == 0]
        self.effect_ = y1.mean() - y0.mean() + self.shift
        self.std_error_ = np.sqrt(y1.var(ddof=1) / y1.size + y0.var(ddof=1) / y0.size)
        return self

    def conf_int(self, level=0.95):
        z = stats.norm.ppf(0.5 + level / 2)
        return self.effect_ - z * self.std_error_, self.effect_ + z * self.std_error_


def trial(n_samples, random_state):
    """A randomized trial in which everyone survives: the SACE is the average effect, 0.5."""
    rng = np.random.default_rng(random_state)
    treatment = rng.integers(0, 2, n_samples)
    return Bunch(
        X=rng.standard_normal((n_samples, 1)),
        y=0.5 * treatment + rng.standard_normal(n_samples),
        treatment=treatment,
        survival=np.ones(n_samples, dtype=int),
        true_effect=0.5,
    )


def other_trial(n_samples, random_state):
    return trial(n_samples, random_state)


def study(seed=1, **change):
    settings = dict(
        estimators={"a": MeanDifference(), "b": MeanDifference(shift=1.0)},
        scenarios={"trial": trial},
        n_samples=30,
        n_reps=4,
        random_state=seed,
        batch_size=2,
        n_jobs=1,
    )
    settings.update(change)
    return settings


def same(a, b):
    pd.testing.assert_frame_equal(a.drop(columns="fit_seconds"), b.drop(columns="fit_seconds"))


def parts(directory):
    return sorted(directory.glob("part-*.parquet"))


def rewrite(path, change, keep_metadata=True):
    """Rewrite a part file with ``change(frame)``; keep its metadata, as a careful editor would."""
    table = pq.read_table(path)
    frame = change(table.to_pandas())
    new = pa.Table.from_pandas(frame, preserve_index=False)
    if keep_metadata:
        new = new.replace_schema_metadata(table.schema.metadata)
    pq.write_table(new, path)


# -- the damage, one function per case -----------------------------------------------------------
def drop_manifest(ck, tmp_path):
    (ck / "study.json").unlink()


def drop_estimator_rows(ck, tmp_path):
    rewrite(parts(ck)[0], lambda f: f[f["estimator"] != "b"])


def drop_rows_with_pandas(ck, tmp_path):
    path = parts(ck)[0]
    frame = pd.read_parquet(path)
    frame[frame["estimator"] != "b"].to_parquet(path, index=False)


def tamper_value(ck, tmp_path):
    rewrite(parts(ck)[0], lambda f: f.assign(estimate=f["estimate"] + 0.1))


def tamper_checksum(ck, tmp_path):
    path = parts(ck)[0]
    table = pq.read_table(path)
    metadata = dict(table.schema.metadata)
    meta = json.loads(metadata[b"pscore_strata.checkpoint"])
    meta["checksum"] = "0" * 64
    metadata[b"pscore_strata.checkpoint"] = json.dumps(meta).encode()
    pq.write_table(table.replace_schema_metadata(metadata), path)


def truncate(ck, tmp_path):
    path = parts(ck)[0]
    path.write_bytes(path.read_bytes()[: path.stat().st_size // 2])


def empty(ck, tmp_path):
    parts(ck)[0].write_bytes(b"")


def foreign_text(ck, tmp_path):
    (ck / "part-notes.parquet").write_text("scenario,estimate\ntrial,0.5\n")


def foreign_parquet(ck, tmp_path):
    pd.DataFrame({"scenario": ["trial"], "estimate": [0.5]}).to_parquet(ck / "part-x.parquet")


def mix_in_other_seed(ck, tmp_path):
    other = tmp_path / "other"
    run_study(**study(seed=2, n_reps=6), checkpoint=other)
    for path in parts(other):
        shutil.copy(path, ck)
    (ck / "study.json").unlink()


def mix_in_other_seed_keeping_manifest(ck, tmp_path):
    other = tmp_path / "other"
    run_study(**study(seed=2, n_reps=6), checkpoint=other)
    shutil.copy(parts(other)[-1], ck)


def truncate_manifest(ck, tmp_path):
    path = ck / "study.json"
    path.write_text(path.read_text()[:20])


def empty_manifest(ck, tmp_path):
    (ck / "study.json").write_text("")


def foreign_manifest(ck, tmp_path):
    (ck / "study.json").write_text('{"name": "my other study"}')


def nothing(ck, tmp_path):
    pass


REFUSED = "refused"
# (case, damage, rerun changes, expected: "same" or the words of the message, file to delete)
CASES = [
    ("manifest deleted, another seed", drop_manifest, {"seed": 2},
     ["another random_state", "delete"], None),
    ("manifest deleted, same seed", drop_manifest, {}, "same", None),
    ("manifest deleted, seed None reuses the parts' seed", drop_manifest, {"seed": None},
     "same", None),
    ("part missing one estimator's rows", drop_estimator_rows, {},
     ["is incomplete", "estimator 'b'", "delete it"], "first part"),
    ("part rewritten without its settings", drop_rows_with_pandas, {},
     ["without run_study's settings", "delete it"], "first part"),
    ("value changed", tamper_value, {}, ["does not match its checksum", "delete it"],
     "first part"),
    ("checksum changed", tamper_checksum, {}, ["does not match its checksum", "delete it"],
     "first part"),
    ("truncated part", truncate, {}, ["cannot be read", "truncated", "delete it"],
     "first part"),
    ("empty part", empty, {}, ["cannot be read", "(empty", "delete it"], "first part"),
    ("text file named as a part", foreign_text, {}, ["cannot be read", "delete it"],
     "part-notes.parquet"),
    ("foreign Parquet file", foreign_parquet, {}, ["without run_study's settings", "delete it"],
     "part-x.parquet"),
    ("parts of two seeds, no manifest", mix_in_other_seed, {},
     ["mixes part files of 2 studies", "delete the others"], None),
    ("part of another seed beside the manifest", mix_in_other_seed_keeping_manifest, {},
     ["written by another study", "delete those part files"], "last copied"),
    ("truncated study.json", truncate_manifest, {}, ["study.json", "delete it"], "study.json"),
    ("empty study.json", empty_manifest, {}, ["study.json", "(empty", "delete it"],
     "study.json"),
    ("foreign study.json", foreign_manifest, {}, ["study.json", "delete it"], "study.json"),
    ("scenario name reused for another callable", nothing,
     {"scenarios": {"trial": other_trial}}, ["scenario 'trial'", "another name"], None),
]  # fmt: skip


@pytest.mark.parametrize(
    "damage, change, expected, remedy", [c[1:] for c in CASES], ids=[c[0] for c in CASES]
)
def test_damaged_checkpoint(tmp_path, damage, change, expected, remedy):
    ck = tmp_path / "ck"
    run_study(**study(), checkpoint=ck)
    uninterrupted = run_study(**study())
    before = set(ck.iterdir())
    damage(ck, tmp_path)
    rerun = study(**change)
    if expected == "same":
        same(run_study(**rerun, checkpoint=ck), uninterrupted)
        return
    named = {
        "first part": sorted(before)[0] if remedy == "first part" else None,
        "last copied": next((p for p in parts(ck) if p not in before), None),
    }.get(remedy) or (ck / remedy if remedy else None)
    with pytest.raises(ValueError) as caught:
        run_study(**rerun, checkpoint=ck)
    message = str(caught.value)
    for words in expected:
        assert words in message, message
    assert "`checkpoint`" in message
    if named is not None:
        assert named.name in message
        named.unlink()  # the remedy the message gives
        same(run_study(**rerun, checkpoint=ck), uninterrupted)


def test_parts_record_settings_cells_and_checksum(tmp_path):
    run_study(**study(), checkpoint=tmp_path)
    meta = json.loads(pq.read_schema(parts(tmp_path)[0]).metadata[b"pscore_strata.checkpoint"])
    assert meta["settings"]["entropy"] == "1" and sorted(meta["settings"]["estimators"]) == [
        "a",
        "b",
    ]
    assert len(meta["cells"]) == 2 and meta["scenarios"] == {
        "trial": f"callable {__name__}.trial"
    }
    assert len(meta["checksum"]) == 64
