"""The per-record caches of a shard job (screen rows, structure analyses, Monte Carlo rows).

A shard job re-runs when any of its records changes. To keep that cheap, every
result row carries ``input_hash`` (record bytes plus its CIF bytes),
``physics_hash`` (the physics settings) and ``code_version`` (the library
sources). After a shard finishes, its tables are copied to its cache folder;
the next run of the shard reuses the rows whose stamps still match and
recomputes only the rest. Changing the code or a physics setting changes the
stamps, so nothing stale is ever reused. The structure analyses of CIFs are
memoised by content hash; the Monte Carlo rows are cached the same way with
their own stamps (settings hash and code version).

File access goes through :mod:`lamellume.io`; no physics here.
"""

from __future__ import annotations

import dataclasses
import logging
from pathlib import Path
from typing import Iterable, Mapping

import numpy as np
import pandas as pd

from lamellume import io
from lamellume.gapshift import THERMAL_FORMS

log = logging.getLogger("lamellume")

#: The tables of a shard's screen, cached together.
SHARD_TABLES = ("entries", "valleys", "rejects", "long", "wide")

#: Reject stages that depend on other files or on the file's name, not on its content
#: alone: never taken from the per-record cache (always decided afresh).
CONTEXT_STAGES = ("skipped", "duplicate")


def is_in(values: pd.Series, members) -> np.ndarray:
    """Boolean mask: which text ``values`` are among ``members`` (Arrow hash lookup, ~5x pandas isin)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    if not len(values):
        return np.zeros(0, dtype=bool)
    mask = pc.is_in(pa.array(values.astype(str), type=pa.large_string()),
                    value_set=pa.array(list(members), type=pa.large_string()))
    return mask.to_numpy(zero_copy_only=False)


class ShardCache:
    """Cached screen rows and structure analyses of one shard.

    The five tables are copied into the cache one after another; a run killed
    in between leaves tables of two generations. Each table carries its
    generation in the file metadata, and a cache whose tables disagree is
    ignored as a whole.
    """

    def __init__(self, cache_dir: str | Path, stamps: Mapping[str, str], temperature_k: float | None = None):
        self.dir = Path(cache_dir)
        self.stamps = dict(stamps)
        self.temperature_k = temperature_k
        self.tables = self._load()
        if self.tables:
            old = self.tables["rejects"]
            self.tables["rejects"] = old[~old["stage"].isin(CONTEXT_STAGES)] if len(old) else old
        self.keys = (set(file_keys(self.tables["entries"])) | set(file_keys(self.tables["rejects"]))
                     if self.tables else set())
        self.keys -= self._other_temperature_keys()
        self.reused: set[str] = set()
        self._memo_path = self.dir / "structures.json"
        self._memo = self._load_memo()
        self._memo_size = len(self._memo)

    def _load(self) -> dict[str, pd.DataFrame]:
        out = {}
        generations = set()
        for name in SHARD_TABLES:
            path = self.dir / f"{name}.parquet"
            if not path.exists():
                return {}
            try:
                generations.add(io.parquet_metadata(path).get("generation"))
                frame = io.read_parquet(path)
            except Exception as exc:  # a damaged cache is ignored, never trusted
                log.warning("ignoring unreadable cache %s: %s", path, exc)
                return {}
            if len(frame):
                keep = ((frame["physics_hash"] == self.stamps["physics_hash"])
                        & (frame["code_version"] == self.stamps["code_version"]))
                frame = frame[keep]
            out[name] = frame
        if len(generations) != 1 or None in generations:
            log.warning("ignoring cache %s: its tables come from different runs", self.dir)
            return {}
        return out

    def _other_temperature_keys(self) -> set[str]:
        """Keys of records with a thermal gap form whose cached rows belong to another temperature.

        Their gaps depend on the operating temperature (wide column
        ``gap_temperature_k``), so they are screened again; every other record's
        rows do not depend on it and are reused.
        """
        if not self.tables or not len(self.tables["entries"]):
            return set()
        entries, wide = self.tables["entries"], self.tables["wide"]
        has_form = entries["gap_t_form"].astype(object).map(THERMAL_FORMS).fillna(0).to_numpy() > 0
        if "gap_temperature_k" in wide.columns:
            at = wide.set_index("entry_id")["gap_temperature_k"].reindex(entries["entry_id"]).to_numpy(dtype=float)
        else:
            at = np.full(len(entries), np.nan)
        want = np.nan if self.temperature_k is None else float(self.temperature_k)
        same = (at == want) | (np.isnan(at) & np.isnan(want))
        return set(file_keys(entries[has_form & ~same]))

    def reuse(self, stem: str, input_hash: str) -> bool:
        """Whether the rows of this record file come from the cache (and mark them for reuse)."""
        key = file_key(stem, input_hash)
        if key in self.keys:
            self.reused.add(key)
            return True
        return False

    def merged(self, name: str, fresh: pd.DataFrame) -> pd.DataFrame:
        """Fresh rows of table ``name`` plus the reused cached rows, in the shard's row order."""
        parts = [fresh]
        if self.tables:
            old = self.tables[name]
            parts.append(old[is_in(file_keys(old), self.reused)])
        parts = [p for p in parts if len(p)]
        if not parts:
            return fresh
        frame = pd.concat(parts, ignore_index=True) if len(parts) > 1 else parts[0]
        order = [c for c in ("entry_id", "valley_index", "layers", "environment", "field") if c in frame.columns]
        return frame.sort_values(order, kind="stable").reset_index(drop=True)

    # -- structure analyses -------------------------------------------------
    def _load_memo(self) -> dict:
        """Structure analyses of earlier runs, keyed by CIF content hash (same code version only)."""
        if not self._memo_path.exists():
            return {}
        try:
            data = io.read_json(self._memo_path)
        except (OSError, ValueError):
            return {}
        return data.get("analyses", {}) if data.get("code_version") == self.stamps["code_version"] else {}

    def structure_geometry(self, cif_bytes: bytes, cif_hash: str) -> tuple[object, str | None]:
        """Layer geometry of a CIF (or the analysis error), memoised by content hash."""
        from lamellume import structure  # pymatgen: imported only when a CIF is analysed

        if cif_hash not in self._memo:
            try:
                geometry = structure.analyse_cif_text(cif_bytes)
                self._memo[cif_hash] = {"geometry": dataclasses.asdict(geometry), "error": None}
            except structure.StructureError as exc:
                self._memo[cif_hash] = {"geometry": None, "error": str(exc)}
        entry = self._memo[cif_hash]
        if entry["error"]:
            return None, entry["error"]
        g = dict(entry["geometry"])
        g["layer_normal"] = None if g["layer_normal"] is None else tuple(g["layer_normal"])
        g["warnings"] = tuple(g["warnings"])
        return structure.LayerGeometry(**g), None

    def save(self, written: Mapping[str, str]) -> None:
        """Copy the written shard tables into the cache; store new structure analyses."""
        for name, path in written.items():
            io.copy_file(path, self.dir / f"{name}.parquet")
        if len(self._memo) != self._memo_size:
            io.write_json({"code_version": self.stamps["code_version"], "analyses": self._memo}, self._memo_path)


def file_key(stem: str, input_hash: str) -> str:
    """Cache key of a record file: its name and its content (record plus CIF bytes).

    Content alone is not enough: a renamed or copied file holds the same bytes
    under another name, and its fate (screened, or rejected for a name that does
    not match its identifier) depends on the name.
    """
    return f"{stem}\0{input_hash}"


def file_keys(frame: pd.DataFrame) -> pd.Series:
    """:func:`file_key` of every row of a shard table (``entry_id`` is the file stem)."""
    return frame["entry_id"].astype(str) + "\0" + frame["input_hash"].astype(str)


def record_keys(frame: pd.DataFrame) -> pd.Series:
    """Per-row cache key of a normalised record: its file key and physics hash."""
    return file_keys(frame) + ":" + frame["physics_hash"].astype(str)


class PropagationCache:
    """Cached Monte Carlo rows of one shard, valid for one settings hash and code version."""

    def __init__(self, cache_dir: str | Path, stamps: Mapping[str, str]):
        self.path = Path(cache_dir) / "uncertainty.parquet"
        self.stamps = dict(stamps)
        self.rows = pd.DataFrame()
        if self.path.exists():
            meta = io.parquet_metadata(self.path)
            if meta == {**meta, **self.stamps}:
                self.rows = io.read_parquet(self.path)

    def reusable(self, keys: Iterable[str]) -> pd.DataFrame:
        """Cached rows whose record key is among ``keys``."""
        if not len(self.rows):
            return self.rows
        return self.rows[is_in(record_keys(self.rows), set(keys))]

    def save(self, written: str) -> None:
        io.copy_file(written, self.path)
