"""The tidy result table of a simulation study and its verified Parquet checkpoint directory.

A checkpoint directory holds ``study.json`` (the study's settings) and one Parquet part file per
finished batch. Every part file carries, in its Parquet key-value metadata, the settings that
produced it (seed entropy, level, estimator names), the fingerprints of the scenarios and
estimators that made its rows (``_fingerprint.py``), the library version and the user's
``version=`` tag, the list of its cells and a SHA-256 checksum of its rows. A resume reads and
checks all of them before it uses any row, so a part file from another seed, a part missing
rows, a changed or damaged file, a file that is not a part file at all and a part computed by
other code or arguments are refused with a message naming the file and saying what to do. The
settings in the part files also stand in for a deleted ``study.json``.
"""

from __future__ import annotations

import hashlib
import json
import os
import uuid
from pathlib import Path

import numpy as np
import pandas as pd

from ._fingerprint import differences

COLUMNS = {
    "scenario": str,
    "n_samples": np.int64,
    "replicate": np.int64,
    "estimator": str,
    "params": str,
    "kind": str,
    "estimate": np.float64,
    "std_error": np.float64,
    "ci_low": np.float64,
    "ci_high": np.float64,
    "interval": str,
    "lower": np.float64,
    "upper": np.float64,
    "set_low": np.float64,
    "set_high": np.float64,
    "truth": np.float64,
    "truth_lower": np.float64,
    "truth_upper": np.float64,
    "failed": bool,
    "error": str,
    "warnings": str,
    "fit_seconds": np.float64,
}
KEY = ["scenario", "n_samples", "params", "replicate"]

_MANIFEST = "study.json"
_FORMAT = 3
_METADATA_KEY = b"pscore_strata.checkpoint"
_DELETE_PART = "delete it and rerun: its replicates are recomputed"


def tidy(rows):
    """The result table with fixed columns and dtypes, whether fresh or read from Parquet."""
    table = pd.DataFrame(list(rows), columns=list(COLUMNS))
    return table.astype(COLUMNS).reset_index(drop=True)


def checksum(table):
    """SHA-256 of a tidy table's column names and values (pandas' stable row hashes)."""
    table = tidy(table.to_dict("records"))
    digest = hashlib.sha256("\x1f".join(table.columns).encode("utf-8"))
    digest.update(pd.util.hash_pandas_object(table, index=False).to_numpy().tobytes())
    return digest.hexdigest()


def describe_scenario(spec):
    """What a scenario name stands for, stored so a rerun cannot reuse the name for another."""
    if isinstance(spec, str):
        return f"scenario {spec}"
    name = getattr(spec, "__qualname__", type(spec).__qualname__)
    return f"callable {getattr(spec, '__module__', '?')}.{name}"


def study_settings(entropy, level, estimators):
    """The settings a part must share with the study; estimators' contents are fingerprinted."""
    return {"entropy": str(entropy), "level": float(level), "estimators": sorted(estimators)}


class CheckpointStore:
    """A directory of verified Parquet part files plus a JSON manifest describing the study.

    Each part is written to a hidden temporary name and renamed into place, so a part file
    either holds a whole batch of replicates or does not exist (``os.replace`` is atomic
    within a file system).
    """

    def __init__(self, path):
        self.path = Path(path)
        self.settings = None
        self.scenarios = {}
        self.fingerprints = {}
        self.replaced = []

    # -- opening: the settings --------------------------------------------------------------
    def open(self, root, seed_unset, estimators, level, scenarios, fingerprints, overwrite=None):
        """Create or check the manifest and every part file's settings; return the study's seed.

        ``scenarios`` maps names to specs (names or callables); ``fingerprints`` holds the
        current ``library``, ``version``, ``estimators`` and ``scenarios`` fingerprints. Raises
        ``ValueError`` naming the file and what to delete when the directory belongs to another
        study, mixes studies or holds a file that is not a readable part file, and naming what
        changed when a part was computed by other code or arguments (with
        ``overwrite="changed"`` such parts are deleted and their replicates recomputed).
        """
        if self.path.exists() and not self.path.is_dir():
            raise ValueError(
                f"`checkpoint` must be a directory path; {str(self.path)!r} is a file."
            )
        self.path.mkdir(parents=True, exist_ok=True)
        self.scenarios = {name: describe_scenario(spec) for name, spec in scenarios.items()}
        self.fingerprints = fingerprints
        parts = {path: self._metadata(path) for path in self._part_paths()}
        manifest = self._read_manifest()
        stored = self._stored_settings(manifest, parts)
        wanted = study_settings(root.entropy, level, estimators)
        if stored is None:
            self.settings = wanted
        else:
            stored_root = np.random.SeedSequence(int(stored["entropy"]))
            if not seed_unset and stored_root.entropy != root.entropy:
                raise ValueError(
                    f"`checkpoint` directory {str(self.path)!r} belongs to a study with another "
                    "random_state; pass the same random_state (or None to reuse the stored "
                    "one), or choose a new checkpoint directory (or delete this one's "
                    "study.json and part-*.parquet files)."
                )
            if sorted(stored["estimators"]) != wanted["estimators"] or stored["level"] != level:
                raise ValueError(
                    f"`checkpoint` directory {str(self.path)!r} belongs to a study with other "
                    f"estimators or level (stored: {sorted(stored['estimators'])}, level "
                    f"{stored['level']}); pass the same ones or choose a new checkpoint "
                    "directory."
                )
            self.settings = stored
            root = stored_root
        self._check_fingerprints(parts, overwrite)
        if manifest is None:
            payload = dict(format=_FORMAT, **self.settings)
            _write_atomic(self.path / _MANIFEST, json.dumps(payload, indent=2).encode("utf-8"))
        return root

    def _part_paths(self):
        return sorted(self.path.glob("part-*.parquet"))

    def _metadata(self, path):
        import pyarrow.parquet as pq

        try:
            metadata = pq.read_schema(path).metadata or {}
        except Exception as error:  # pyarrow raises several types; all mean "not a part file"
            raise ValueError(_unreadable(path, error)) from None
        raw = metadata.get(_METADATA_KEY)
        try:
            meta = json.loads(raw.decode("utf-8"))
            meta["settings"]["entropy"], meta["cells"], meta["checksum"], meta["scenarios"]
            meta["fingerprints"]["estimators"], meta["fingerprints"]["scenarios"]
        except Exception:
            raise ValueError(
                f"`checkpoint` file {str(path)!r} is a Parquet file without run_study's "
                "settings and checksum (written by another program, or by a version of "
                f"pscore_strata that did not verify checkpoints); {_DELETE_PART}."
            ) from None
        return meta

    def _read_manifest(self):
        path = self.path / _MANIFEST
        if not path.exists():
            return None
        try:
            manifest = json.loads(path.read_text(encoding="utf-8"))
            settings = {k: manifest[k] for k in ("entropy", "level", "estimators")}
            int(settings["entropy"]), float(settings["level"]), sorted(settings["estimators"])
        except Exception as error:
            reason = "empty" if path.stat().st_size == 0 else type(error).__name__
            raise ValueError(
                f"`checkpoint` file {str(path)!r} is not a readable study description "
                f"({reason}: truncated, empty or not written by run_study); delete it and "
                "rerun: the settings are recovered from the part files, and a new study starts "
                "if there are none."
            ) from None
        return settings

    def _stored_settings(self, manifest, parts):
        """The directory's one set of settings, or None for a new study; refuse a mixture."""
        groups = {}
        for path, meta in parts.items():
            groups.setdefault(json.dumps(meta["settings"], sort_keys=True), []).append(path)
        if manifest is not None:
            own = json.dumps(manifest, sort_keys=True)
            others = [p for key, paths in groups.items() if key != own for p in paths]
            if others:
                raise ValueError(
                    f"`checkpoint` directory {str(self.path)!r}: {_listed(others)} were written "
                    "by another study (other random_state, estimators or level) than its "
                    "study.json describes; delete those part files (their replicates are "
                    "recomputed), or delete study.json if it is the stale one."
                )
            return manifest
        if len(groups) > 1:
            described = "; ".join(
                f"study {i + 1} (seed entropy {json.loads(key)['entropy']}, estimators "
                f"{sorted(json.loads(key)['estimators'])}): {_listed(paths)}"
                for i, (key, paths) in enumerate(groups.items())
            )
            raise ValueError(
                f"`checkpoint` directory {str(self.path)!r} mixes part files of {len(groups)} "
                f"studies and has no study.json: {described}. Keep the part files of one study "
                "and delete the others (or delete the whole directory), then rerun."
            )
        return json.loads(next(iter(groups))) if groups else None

    def _check_fingerprints(self, parts, overwrite):
        """Refuse (or, with ``overwrite="changed"``, delete) parts computed by other code."""
        current = self.fingerprints
        stale = {}
        for path, meta in parts.items():
            stored = meta["fingerprints"]
            changes = []
            for what in ("library", "version"):
                if stored.get(what) != current[what]:
                    label = "pscore_strata version" if what == "library" else "version= tag"
                    changes.append(f"{label} {stored.get(what)!r} -> {current[what]!r}")
            for name, fingerprint in current["estimators"].items():
                found = differences(stored["estimators"].get(name), fingerprint)
                if found:
                    changes.append(f"estimator {name!r}: {'; '.join(found)}")
            for name, fingerprint in stored["scenarios"].items():
                if name in current["scenarios"]:
                    found = differences(fingerprint, current["scenarios"][name])
                    if found:
                        changes.append(f"scenario {name!r}: {'; '.join(found)}")
            if changes:
                stale[path] = changes
        if not stale:
            return
        if overwrite == "changed":
            for path in stale:
                path.unlink()
            self.replaced = sorted(stale)
            return
        first = next(iter(stale.values()))
        raise ValueError(
            f"`checkpoint` directory {str(self.path)!r}: {_listed(list(stale))} hold results "
            f"computed by other code or settings than this study's ({'; '.join(first)}). Pass "
            "overwrite='changed' to recompute those replicates; to keep both, give the changed "
            "scenario another name (or the estimator another name) or choose a new checkpoint "
            "directory."
        )

    # -- the rows ----------------------------------------------------------------------------
    def load(self):
        """All finished rows, each part checked; a replicate saved twice is kept once."""
        import pyarrow.parquet as pq

        tables = []
        for path in self._part_paths():
            meta = self._metadata(path)
            try:
                table = tidy(pq.read_table(path).to_pandas().to_dict("records"))
            except Exception as error:
                raise ValueError(_unreadable(path, error)) from None
            self._check_rows(path, meta, table)
            tables.append(table)
        if not tables:
            return tidy([])
        table = pd.concat(tables, ignore_index=True)
        table = table.drop_duplicates([*KEY, "estimator"])
        return tidy(table.to_dict("records"))

    def _check_rows(self, path, meta, table):
        names = list(self.settings["estimators"])
        expected = pd.MultiIndex.from_tuples(
            [(s, int(n), p, int(r), e) for s, n, p, r in meta["cells"] for e in names],
            names=[*KEY, "estimator"],
        )
        found = pd.MultiIndex.from_frame(table[[*KEY, "estimator"]])
        missing = expected.difference(found)
        if len(missing):
            by_estimator = pd.Series([m[4] for m in missing]).value_counts()
            listed = ", ".join(f"{e!r} ({k} of {len(meta['cells'])} cells)"
                               for e, k in by_estimator.items())  # fmt: skip
            raise ValueError(
                f"`checkpoint` file {str(path)!r} is incomplete: it lacks the rows of estimator "
                f"{listed}; {_DELETE_PART}."
            )
        if found.has_duplicates or len(found.difference(expected)):
            raise ValueError(
                f"`checkpoint` file {str(path)!r} holds rows it does not list (duplicated or "
                f"foreign replicates); {_DELETE_PART}."
            )
        if checksum(table) != meta["checksum"]:
            raise ValueError(
                f"`checkpoint` file {str(path)!r} does not match its checksum (its rows were "
                f"changed after it was written, or it is damaged); {_DELETE_PART}."
            )

    def save(self, part, cells):
        """Write one batch (``cells``: its (scenario, n, params, replicate) keys) as a part."""
        import pyarrow as pa
        import pyarrow.parquet as pq

        meta = {
            "format": _FORMAT,
            "settings": self.settings,
            "scenarios": {s: self.scenarios[s] for s in dict.fromkeys(c[0] for c in cells)},
            "fingerprints": {
                "library": self.fingerprints["library"],
                "version": self.fingerprints["version"],
                "estimators": self.fingerprints["estimators"],
                "scenarios": {
                    s: self.fingerprints["scenarios"][s] for s in dict.fromkeys(c[0] for c in cells)
                },
            },
            "cells": [[s, int(n), p, int(r)] for s, n, p, r in cells],
            "checksum": checksum(part),
        }
        table = pa.Table.from_pandas(part, preserve_index=False)
        metadata = dict(table.schema.metadata or {})
        metadata[_METADATA_KEY] = json.dumps(meta).encode("utf-8")
        name = f"part-{uuid.uuid4().hex}.parquet"
        temporary = self.path / f".{name}.tmp"
        pq.write_table(table.replace_schema_metadata(metadata), temporary)
        os.replace(temporary, self.path / name)


def _unreadable(path, error):
    reason = "empty" if path.stat().st_size == 0 else type(error).__name__
    return (
        f"`checkpoint` file {str(path)!r} cannot be read as a run_study part file ({reason}: "
        f"truncated, empty or not a Parquet file); {_DELETE_PART}."
    )


def _listed(paths, shown=3):
    names = [p.name for p in paths]
    more = f" and {len(names) - shown} more" if len(names) > shown else ""
    return f"{len(names)} part file(s) ({', '.join(names[:shown])}{more})"


def _write_atomic(path, payload):
    temporary = path.with_name(f".{path.name}.tmp")
    temporary.write_bytes(payload)
    os.replace(temporary, path)
