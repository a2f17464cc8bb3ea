"""The tidy result table of a simulation study and its Parquet checkpoint directory."""

from __future__ import annotations

import json
import os
import uuid
from pathlib import Path

import numpy as np
import pandas as pd

COLUMNS = {
    "scenario": str,
    "n_samples": np.int64,
    "replicate": np.int64,
    "estimator": str,
    "estimate": np.float64,
    "std_error": np.float64,
    "ci_low": np.float64,
    "ci_high": np.float64,
    "truth": np.float64,
    "failed": bool,
    "error": str,
    "warnings": str,
    "fit_seconds": np.float64,
}

_MANIFEST = "study.json"
_FORMAT = 1


def tidy(rows):
    """The result table with fixed columns and dtypes, whether fresh or read from Parquet."""
    table = pd.DataFrame(list(rows), columns=list(COLUMNS))
    return table.astype(COLUMNS).reset_index(drop=True)


class CheckpointStore:
    """A directory of Parquet part files plus a JSON manifest describing the study.

    Each part is written to a hidden temporary name and renamed into place, so a part file
    either holds a whole batch of replicates or does not exist (``os.replace`` is atomic
    within a file system).
    """

    def __init__(self, path):
        self.path = Path(path)

    def open(self, root, seed_unset, estimators, level):
        """Create or check the manifest; return the SeedSequence the study must use."""
        if self.path.exists() and not self.path.is_dir():
            raise ValueError(
                f"`checkpoint` must be a directory path; {str(self.path)!r} is a file."
            )
        self.path.mkdir(parents=True, exist_ok=True)
        manifest_path = self.path / _MANIFEST
        described = {name: repr(est) for name, est in estimators.items()}
        if not manifest_path.exists():
            manifest = {
                "format": _FORMAT,
                "entropy": str(root.entropy),
                "level": level,
                "estimators": described,
            }
            _write_atomic(manifest_path, json.dumps(manifest, indent=2).encode("utf-8"))
            return root
        manifest = json.loads(manifest_path.read_text(encoding="utf-8"))
        stored = np.random.SeedSequence(int(manifest["entropy"]))
        if not seed_unset and stored.entropy != root.entropy:
            raise ValueError(
                f"`checkpoint` directory {str(self.path)!r} belongs to a study with another "
                "random_state; pass the same random_state (or None to reuse the stored one), or "
                "choose a new checkpoint directory."
            )
        if manifest["estimators"] != described or manifest["level"] != level:
            raise ValueError(
                f"`checkpoint` directory {str(self.path)!r} belongs to a study with other "
                f"estimators or level (stored: {sorted(manifest['estimators'])}, level "
                f"{manifest['level']}); pass the same ones or choose a new checkpoint directory."
            )
        return stored

    def load(self):
        """All finished rows; a replicate saved twice (e.g. by two runs) is kept once."""
        parts = sorted(self.path.glob("part-*.parquet"))
        if not parts:
            return tidy([])
        table = pd.concat([pd.read_parquet(p) for p in parts], ignore_index=True)
        table = table.drop_duplicates(["scenario", "n_samples", "replicate", "estimator"])
        return tidy(table.to_dict("records"))

    def save(self, part):
        name = f"part-{uuid.uuid4().hex}.parquet"
        temporary = self.path / f".{name}.tmp"
        part.to_parquet(temporary, engine="pyarrow", index=False)
        os.replace(temporary, self.path / name)


def _write_atomic(path, payload):
    temporary = path.with_name(f".{path.name}.tmp")
    temporary.write_bytes(payload)
    os.replace(temporary, path)
