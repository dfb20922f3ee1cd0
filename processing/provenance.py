"""What a result was made with: the analysis version, the library hash and the settings hash.

Every version of a run in the ledger carries these three, so `bandwatch reprocess` can tell a
run analysed by today's analysis (skip it) from one made by an older analysis, library or
settings (analyse it again), and a reader of the ledger can say which analysis judged a run.

- analysis version: the package version and a hash of the analysis code's bytes (every module
  of `processing/` except the station and reprocess orchestration, which change no result).
  Any edit to that code, a comment included, is a new version: re-analysing costs time, trusting
  a stale result costs correctness.
- library hash: the bytes of the shipped constants library, and of the user's library file
  when one is given.
- settings hash: the analysis settings and check thresholds a run was judged with (not where
  files may be read from, which changes no result).
"""
from __future__ import annotations

import functools
import hashlib
import json
from dataclasses import dataclass, fields
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from processing.pipeline import ProcessSettings

HASH_CHARACTERS = 16  # 64 bits of sha256: ample to tell versions apart, short enough to read
ORCHESTRATION = ("station", "reprocess")  # subpackages of processing/ that change no result
NOT_ANALYSIS_SETTINGS = ("read_policy", "library_file")  # the library file counts through its bytes


@dataclass(frozen=True)
class Provenance:
    """The analysis version, library hash and settings hash a result was (or will be) made with."""

    analysis_version: str
    library_hash: str
    settings_hash: str

    def to_dict(self) -> dict[str, str]:
        return {"analysis_version": self.analysis_version, "library_hash": self.library_hash, "settings_hash": self.settings_hash}


@functools.lru_cache(maxsize=1)
def package_version() -> str:
    """The installed package's version ("0+unknown" in a source tree never installed); looked
    up once per process."""
    from importlib import metadata  # here, not at the top: 20 ms that `bandwatch process` never needs

    try:
        return metadata.version("bandwatch")
    except metadata.PackageNotFoundError:  # run from a source tree that was never installed
        return "0+unknown"


@functools.lru_cache(maxsize=1)
def analysis_code_hash() -> str:
    """The hash of this installation's analysis code (computed once per process)."""
    return code_hash(Path(__file__).resolve().parent)


def code_hash(root: Path) -> str:
    """sha256 over the file names and bytes of the modules under `root` (a `processing`
    folder) except the orchestration subpackages; sorted, so the order is fixed."""
    digest = hashlib.sha256()
    for path in sorted(root.rglob("*.py")):
        relative = path.relative_to(root)
        if relative.parts[0] in ORCHESTRATION:
            continue
        digest.update(relative.as_posix().encode("utf-8") + b"\0")
        digest.update(path.read_bytes() + b"\0")
    return digest.hexdigest()[:HASH_CHARACTERS]


def analysis_version() -> str:
    """'0.1.0+3f2a...': the package version and the analysis code's hash."""
    return f"{package_version()}+{analysis_code_hash()}"


@functools.lru_cache(maxsize=8)
def _file_hash(path: str, size: int, mtime_ns: int) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def library_hash(library_file: str | Path | None = None) -> str:
    """sha256 of the shipped library's bytes, and of the user's library file when given."""
    from processing.species import shipped_library_path

    digest = hashlib.sha256()
    for path in (shipped_library_path(), *([Path(library_file)] if library_file else [])):
        found = path.stat()
        digest.update(_file_hash(str(path), found.st_size, found.st_mtime_ns).encode("ascii"))
    return digest.hexdigest()[:HASH_CHARACTERS]


def settings_hash(settings: ProcessSettings) -> str:
    """sha256 of the settings that change a result (species, detection, thresholds ...)."""
    chosen = {f.name: _plain(getattr(settings, f.name)) for f in fields(settings) if f.name not in NOT_ANALYSIS_SETTINGS}
    text = json.dumps(chosen, sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:HASH_CHARACTERS]


def _plain(value: Any) -> Any:
    """Settings as JSON-able data: dataclasses as dicts, tuples as lists (floats by repr)."""
    if hasattr(value, "__dataclass_fields__"):
        return {f.name: _plain(getattr(value, f.name)) for f in fields(value)}
    if isinstance(value, (tuple, list)):
        return [_plain(item) for item in value]
    return value


def current_provenance(settings: ProcessSettings) -> Provenance:
    """What a result made now with `settings` carries."""
    return Provenance(analysis_version(), library_hash(settings.library_file), settings_hash(settings))
