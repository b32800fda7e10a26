"""Results store: a folder of Parquet chunks and a manifest, so no finished work is lost.

Layout of a store folder::

    manifest.json          what was asked (canonical JSON), its hash, the seed,
                           the package version, and a log of the runs into it
    study-000/             one folder per study of the question (a sweep has one
        r000000000-000000050.parquet    per point): one Parquet file per finished
        ...                             chunk of replications [first, stop)

Every chunk is written to a temporary file and renamed into place, so a chunk
file is either whole or absent, even if the process is killed mid-write. Every
chunk is checked when it is read (Parquet footer and page checksums, row
count, replication numbers, the question's hash); a chunk that fails is named
in a warning, set aside as ``*.corrupt`` and recomputed, never read as data.

Only one run at a time may write into a store.
"""

from __future__ import annotations

import dataclasses
import hashlib
import inspect
import json
import math
import os
import warnings
from collections.abc import Mapping, Sequence
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pandas as pd

FORMAT = 1
"""Version of the store layout written in every manifest."""

MANIFEST = "manifest.json"
SHOWN_DIFFERENCES = 3
"""Differences named when a store is refused."""


# --------------------------------------------------------------------------- the question
def describe(value: object) -> object:
    """A canonical JSON form of ``value`` (markets, treatments, designs, estimators, ...).

    Numbers keep every bit (floats are written by ``repr``, which round-trips);
    arrays become nested lists with their dtype; objects become their class's
    full name and their attributes (dataclass fields, or the instance
    dictionary), so two objects with the same description ask the same question.
    """
    if value is None or isinstance(value, (bool, str)):
        return value
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        number = float(value)
        return number if math.isfinite(number) else repr(number)
    if isinstance(value, np.ndarray):
        return {"array": describe(value.tolist()), "dtype": str(value.dtype)}
    if isinstance(value, Mapping):
        return {str(key): describe(item) for key, item in value.items()}
    if isinstance(value, (list, tuple)):
        return [describe(item) for item in value]
    if isinstance(value, np.random.SeedSequence):
        return seed_record(value)
    if isinstance(value, type) or inspect.isroutine(value):
        return {"callable": f"{value.__module__}.{value.__qualname__}"}
    kind = f"{type(value).__module__}.{type(value).__qualname__}"
    if dataclasses.is_dataclass(value):
        fields = {f.name: getattr(value, f.name) for f in dataclasses.fields(value)}
    elif hasattr(value, "__dict__"):
        fields = dict(vars(value))
    else:
        fields = {"repr": repr(value)}
    return {"type": kind, **{name: describe(item) for name, item in sorted(fields.items())}}


def package_version() -> str:
    """The installed version of marketsim ("unknown" when it runs uninstalled)."""
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("marketsim")
    except PackageNotFoundError:
        return "unknown"


def canonical_json(question: object) -> str:
    """The one text of a described question: sorted keys, no spaces."""
    return json.dumps(question, sort_keys=True, separators=(",", ":"), allow_nan=False)


def question_hash(question: object) -> str:
    """SHA-256 of :func:`canonical_json` (hex)."""
    return hashlib.sha256(canonical_json(question).encode()).hexdigest()


def seed_record(seed: np.random.SeedSequence) -> dict:
    """What identifies a root seed: entropy, spawn key and pool size."""
    return {"entropy": str(seed.entropy), "spawn_key": [int(k) for k in seed.spawn_key],
            "pool_size": int(seed.pool_size)}


def seed_from_record(record: Mapping) -> np.random.SeedSequence:
    """The :class:`numpy.random.SeedSequence` a :func:`seed_record` describes."""
    return np.random.SeedSequence(int(record["entropy"]), spawn_key=tuple(record["spawn_key"]),
                                  pool_size=int(record["pool_size"]))


def differences(stored: object, asked: object, where: str = "") -> list[str]:
    """Paths at which two described questions differ, with both values (stored first)."""
    if isinstance(stored, dict) and isinstance(asked, dict):
        found = []
        for key in sorted(set(stored) | set(asked)):
            path = f"{where}.{key}" if where else key
            if key not in stored or key not in asked:
                side = "here only" if key not in stored else "in the store only"
                found.append(f"{path} ({side})")
            else:
                found += differences(stored[key], asked[key], path)
        return found
    if isinstance(stored, list) and isinstance(asked, list) and len(stored) == len(asked):
        found = []
        for k, (a, b) in enumerate(zip(stored, asked)):
            found += differences(a, b, f"{where}[{k}]")
        return found
    if stored == asked:
        return []
    return [f"{where or 'the question'} is {_short(stored)} in the store, {_short(asked)} here"]


def _short(value: object) -> str:
    text = json.dumps(value, sort_keys=True)
    return text if len(text) <= 60 else text[:57] + "..."


# --------------------------------------------------------------------------- the store
class ResultsStore:
    """A results store folder opened for one question (see the module docstring).

    Parameters
    ----------
    path : str or os.PathLike
        The folder; created if it does not exist.
    kind : str
        What made it: ``"study"``, ``"sweep"``, ``"design choice"``, ``"horizon plan"``.
    question : dict
        The question asked, as built by :func:`describe` (seed excluded).
    seed : numpy.random.SeedSequence
        The root seed of the run.

    Raises
    ------
    ValueError
        If the folder holds a store made for another kind, question or seed
        (the message names what differs), or is not a store at all.
    """

    def __init__(self, path: str | os.PathLike, *, kind: str, question: dict,
                 seed: np.random.SeedSequence) -> None:
        version = package_version()
        self.path = Path(path)
        self.kind = kind
        self.question = question
        self.hash = question_hash(question)
        self.seed = seed_record(seed)
        manifest = self.path / MANIFEST
        if manifest.exists():
            self.manifest = self._check(read_manifest(self.path))
            if self.manifest["package_version"] != version:
                warnings.warn(
                    f"store {str(self.path)!r} was written by marketsim "
                    f"{self.manifest['package_version']}, this is {version}: the "
                    "replications it holds are kept; if the engine changed in between, "
                    "they may differ from a fresh run", RuntimeWarning, stacklevel=3)
        else:
            if self.path.exists() and (not self.path.is_dir() or any(self.path.iterdir())):
                raise ValueError(
                    f"store must be a new or empty folder or an existing results store, got "
                    f"{str(self.path)!r}, which holds other files (no {MANIFEST})")
            self.path.mkdir(parents=True, exist_ok=True)
            self.manifest = {
                "format": FORMAT, "kind": kind, "question_hash": self.hash,
                "seed": self.seed, "package_version": version,
                "created": _now(), "question": question, "runs": [],
            }
            self._save()
        for stale in self.path.glob("study-*/*.tmp-*"):  # a run killed mid-write
            stale.unlink(missing_ok=True)

    def _check(self, stored: dict) -> dict:
        where = f"store {str(self.path)!r}"
        if stored.get("format") != FORMAT:
            raise ValueError(f"{where} has layout format {stored.get('format')!r}; this "
                             f"version of marketsim reads format {FORMAT}")
        if stored.get("kind") != self.kind:
            raise ValueError(f"{where} holds a {stored.get('kind')}, not a {self.kind}: use "
                             "another folder")
        if stored.get("seed") != self.seed:
            raise ValueError(
                f"{where} was made with another seed (entropy {stored['seed']['entropy']}, "
                f"spawn key {stored['seed']['spawn_key']}), not entropy {self.seed['entropy']}, "
                f"spawn key {self.seed['spawn_key']}: pass the same seed (or seed=None to "
                "take the store's) or use another folder")
        if stored.get("question_hash") != self.hash:
            found = differences(stored.get("question"), self.question)
            more = len(found) - SHOWN_DIFFERENCES
            listed = "; ".join(found[:SHOWN_DIFFERENCES]) + (
                f"; and {more} more" if more > 0 else "") or "its hash differs"
            raise ValueError(f"{where} was made for another question ({listed}); use another "
                             "folder for this question")
        return stored

    def job_folder(self, job: int) -> Path:
        return self.path / f"study-{job:03d}"

    def finished(self, job: int, rows_per_replication: int) -> set[int]:
        """Replications of study ``job`` whose chunks read back whole.

        A chunk that does not is named in a ``RuntimeWarning``, renamed to
        ``*.corrupt`` and left out (so it is recomputed).
        """
        done: set[int] = set()
        for chunk in sorted(self.job_folder(job).glob("r*.parquet")):
            try:
                table = self._read_chunk(chunk, rows_per_replication, None)
            except ValueError as error:
                warnings.warn(f"results store: chunk {chunk} is corrupt ({error}); it is set "
                              "aside as .corrupt and its replications are recomputed",
                              RuntimeWarning, stacklevel=3)
                chunk.replace(chunk.with_name(chunk.name + ".corrupt"))
                continue
            done.update(np.unique(table["replication"].to_numpy()).tolist())
        return done

    def write(self, job: int, indices: range, table: pd.DataFrame) -> None:
        """Write the rows of replications ``indices`` (a contiguous range) atomically."""
        import pyarrow as pa
        import pyarrow.parquet as pq

        folder = self.job_folder(job)
        folder.mkdir(exist_ok=True)
        arrow = pa.Table.from_pandas(table, preserve_index=False)
        arrow = arrow.replace_schema_metadata({
            **(arrow.schema.metadata or {}),
            b"marketsim.question_hash": self.hash.encode(),
            b"marketsim.replications": f"{indices.start}-{indices.stop}".encode(),
        })
        target = folder / f"r{indices.start:09d}-{indices.stop:09d}.parquet"
        temporary = target.with_name(f"{target.name}.tmp-{os.getpid()}")
        pq.write_table(arrow, temporary, write_page_checksum=True)
        with open(temporary, "rb") as handle:
            os.fsync(handle.fileno())
        os.replace(temporary, target)

    def read(self, job: int, indices: Sequence[int], rows_per_replication: int,
             columns: Sequence[str] | None = None) -> pd.DataFrame:
        """Rows of the replications ``indices`` of study ``job``, in replication order.

        Raises
        ------
        ValueError
            If a chunk is corrupt or a replication is missing.
        """
        wanted = set(indices)
        frames = []
        for chunk in sorted(self.job_folder(job).glob("r*.parquet")):
            first, stop = _chunk_range(chunk)
            if wanted.isdisjoint(range(first, stop)):
                continue
            table = self._read_chunk(chunk, rows_per_replication, columns)
            frames.append(table[table["replication"].isin(wanted)])
        result = (pd.concat(frames, ignore_index=True) if frames
                  else pd.DataFrame(columns=["replication", *(columns or [])]))
        result = result.sort_values("replication", kind="stable", ignore_index=True)
        found = result["replication"].nunique()
        if found != len(wanted):
            raise ValueError(f"store {str(self.path)!r}: {len(wanted) - found} of the "
                             f"{len(wanted)} replications asked for are not in study {job}")
        return result

    def _read_chunk(self, chunk: Path, rows_per_replication: int,
                    columns: Sequence[str] | None) -> pd.DataFrame:
        """Read and check one chunk; ``ValueError`` names what is wrong."""
        import pyarrow as pa
        import pyarrow.parquet as pq

        first, stop = _chunk_range(chunk)
        wanted = None if columns is None else list(dict.fromkeys(["replication", *columns]))
        try:
            arrow = pq.read_table(chunk, columns=wanted, page_checksum_verification=True)
        except (OSError, pa.ArrowException) as error:
            raise ValueError(f"unreadable Parquet: {error}") from None
        metadata = pq.read_schema(chunk).metadata or {}
        if metadata.get(b"marketsim.question_hash") != self.hash.encode():
            raise ValueError("it belongs to another question")
        if metadata.get(b"marketsim.replications") != f"{first}-{stop}".encode():
            raise ValueError("its name and its contents disagree")
        table = arrow.to_pandas()
        expected = np.repeat(np.arange(first, stop), rows_per_replication)
        if not np.array_equal(table["replication"].to_numpy(), expected):
            raise ValueError(f"expected {expected.size} rows for replications {first} to "
                             f"{stop - 1}, found {len(table)}")
        return table

    def start_run(self, **facts: object) -> None:
        """Log a run's start (replications asked for, backend) in the manifest, so a
        run killed before it ends can be resumed with the same count."""
        self.manifest["runs"].append({"started": _now(), **facts})
        self._save()

    def end_run(self, **facts: object) -> None:
        """Add the facts of the end of the run (time, interruption) to its log entry."""
        self.manifest["runs"][-1].update({"finished": _now(), **facts})
        self._save()

    def _save(self) -> None:
        _write_atomic(self.path / MANIFEST, json.dumps(self.manifest, indent=1, sort_keys=True))


def read_manifest(path: str | os.PathLike) -> dict:
    """The manifest of the store at ``path``.

    Raises
    ------
    ValueError
        If ``path`` is not a results store or its manifest is unreadable.
    """
    manifest = Path(path) / MANIFEST
    try:
        return json.loads(manifest.read_text())
    except FileNotFoundError:
        raise ValueError(f"store must be a results store folder (with {MANIFEST}), got "
                         f"{str(path)!r}") from None
    except (OSError, ValueError) as error:
        raise ValueError(f"store {str(path)!r} has an unreadable {MANIFEST}: {error}") from None


def open_existing(path: str | os.PathLike) -> ResultsStore:
    """The store at ``path``, opened for the question it holds (to read it back)."""
    manifest = read_manifest(path)
    return ResultsStore(path, kind=manifest["kind"], question=manifest["question"],
                        seed=seed_from_record(manifest["seed"]))


def _chunk_range(chunk: Path) -> tuple[int, int]:
    first, stop = chunk.stem[1:].split("-")
    return int(first), int(stop)


def _write_atomic(target: Path, text: str) -> None:
    temporary = target.with_name(f"{target.name}.tmp-{os.getpid()}")
    with open(temporary, "w") as handle:
        handle.write(text)
        handle.flush()
        os.fsync(handle.fileno())
    os.replace(temporary, target)


def _now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


__all__ = ["ResultsStore", "describe", "question_hash", "read_manifest", "seed_record",
           "seed_from_record"]
