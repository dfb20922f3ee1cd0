"""Station configuration: a TOML file, validated into a frozen `StationConfig`.

Every bad value is one `ConfigError` naming the file and the key. Command-line options
override the file (`StationConfig.with_overrides`). `TEMPLATE` is what `bandwatch init` writes.
"""
from __future__ import annotations

import math
import os
import socket
import tomllib
from dataclasses import dataclass, field, fields, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

from processing.check_thresholds import CheckThresholds
from processing.errors import ConfigError, LibraryFileError, UnknownSpeciesError

if TYPE_CHECKING:
    from processing.pipeline import ProcessSettings
    from processing.regular_files import ReadPolicy

DEFAULT_PROCESS_FUNCTION = "processing.pipeline:process_file"
DEFAULT_EXCLUDE = (".*", "~*", "*~", "*.tmp", "*.part", "*.partial", "*.crdownload", "*.swp", "*.lock")


def config_home() -> Path:
    """bandwatch's folder of user settings: $XDG_CONFIG_HOME/bandwatch, else ~/.config/bandwatch."""
    base = os.environ.get("XDG_CONFIG_HOME") or str(Path.home() / ".config")
    return Path(base) / "bandwatch"


def default_config_path() -> Path:
    """$BANDWATCH_CONFIG, else station.toml in `config_home()`."""
    explicit = os.environ.get("BANDWATCH_CONFIG")
    if explicit:
        return Path(explicit).expanduser()
    return config_home() / "station.toml"


def default_instrument() -> str:
    """The instrument name when none is configured: this computer's host name."""
    return socket.gethostname() or "instrument"


def default_data_dir() -> Path:
    """$XDG_DATA_HOME/bandwatch, else ~/.local/share/bandwatch."""
    base = os.environ.get("XDG_DATA_HOME") or str(Path.home() / ".local" / "share")
    return Path(base) / "bandwatch"


@dataclass(frozen=True)
class StationConfig:
    """Everything the station needs; defaults suit one instrument PC with 2 cores."""

    export_folder: Path | None = None
    data_folder: Path = field(default_factory=default_data_dir)
    include: tuple[str, ...] = ("*",)
    exclude: tuple[str, ...] = ()  # in addition to DEFAULT_EXCLUDE (temporary/partial files)
    recursive: bool = False
    poll: bool = False
    follow_links_outside: bool = False  # symbolic links from the export folder to elsewhere
    settle_seconds: float = 0.5
    max_wait_seconds: float = 30.0  # an incomplete file (JCAMP without ##END=) waits this long
    rescan_seconds: float = 5.0
    operator: str = ""
    workers: int = 2
    timeout_seconds: float = 60.0
    memory_limit_mb: int = 2048
    species: tuple[str, ...] = ()  # expected molecules or isotopologues (analysis setting)
    checks: CheckThresholds = field(default_factory=CheckThresholds)  # the [checks] table: run check limits only
    instrument: str = field(default_factory=default_instrument)  # [station] instrument: runs are keyed by it
    ledger_url: str | None = None  # [ledger] url: a PostgreSQL server instead of the data folder's file
    cluster_address: str | None = None  # the [cluster] table's address: Dask scheduler for `bandwatch reprocess`
    source: str | None = None  # the file this came from, for messages
    # "module:function" taking (path, ProcessSettings) -> RunResult; tests inject failures here
    process_function: str = DEFAULT_PROCESS_FUNCTION

    def with_overrides(self, **values: Any) -> StationConfig:
        """A copy with the non-None values replaced, validated again."""
        chosen = {key: value for key, value in values.items() if value is not None}
        return validate(replace(self, **chosen))

    @property
    def excluded_patterns(self) -> tuple[str, ...]:
        return DEFAULT_EXCLUDE + self.exclude

    @property
    def ledger_location(self) -> str | Path:
        """Where the ledger is: the server's URL when one is configured, else the data folder
        (whose ledger.sqlite3 is the ledger)."""
        return self.ledger_url if self.ledger_url else self.data_folder.expanduser()


# keys given in tables of their own: [station] instrument, [ledger] url ([cluster] address: below)
_TABLES = {"station": {"instrument": "instrument"}, "ledger": {"url": "ledger_url"}}
_KEYS = (
    {f.name for f in fields(StationConfig)} - {"source", "process_function", "instrument", "ledger_url", "cluster_address"}
) | set(_TABLES) | {"cluster"}
CLUSTER_KEYS = ("address",)


def load_config(path: str | Path | None = None, *, required: bool = False) -> StationConfig:
    """Read a station TOML file; a missing default file gives the defaults."""
    chosen = Path(path).expanduser() if path is not None else default_config_path()
    if not chosen.exists():
        if required or path is not None:
            raise ConfigError(chosen, "file", "no such configuration file")
        return StationConfig()
    try:
        with open(chosen, "rb") as handle:
            table = tomllib.load(handle)
    except tomllib.TOMLDecodeError as error:
        raise ConfigError(chosen, "file", f"not valid TOML ({error})") from None
    except OSError as error:
        raise ConfigError(chosen, "file", f"cannot be read ({error.strerror or error})") from None
    return config_from_table(table, source=str(chosen), base_dir=chosen.parent)


def config_from_table(table: dict[str, Any], source: str | None = None, base_dir: Path | None = None) -> StationConfig:
    """Validate a parsed TOML table; relative folders are taken relative to the file."""
    for key in table:
        if key not in _KEYS:
            raise ConfigError(source, key, f"unknown key (known: {', '.join(sorted(_KEYS))})")
    values: dict[str, Any] = {}
    for key, value in table.items():
        if key in _TABLES:
            values.update(_table_values(source, key, value))
            continue
        if key == "cluster":
            values["cluster_address"] = _cluster_address(source, value)
            continue
        values[key] = _convert(source, key, value, base_dir)
    return validate(replace(StationConfig(source=source), **values))


def _table_values(source: str | None, name: str, table: Any) -> dict[str, Any]:
    """The keys of [station] or [ledger], each under its field's name (checked in `validate`)."""
    known = _TABLES[name]
    if not isinstance(table, dict):
        raise ConfigError(source, name, f"must be a table ([{name}])")
    values: dict[str, Any] = {}
    for key, value in table.items():
        if key not in known:
            raise ConfigError(source, f"{name}.{key}", f"unknown key (known in [{name}]: {', '.join(sorted(known))})")
        if not isinstance(value, str):
            raise ConfigError(source, f"{name}.{key}", "must be a string")
        values[known[key]] = value.strip()
    return values


def _convert(source: str | None, key: str, value: Any, base_dir: Path | None) -> Any:
    if key in ("export_folder", "data_folder"):
        if not isinstance(value, str) or not value.strip():
            raise ConfigError(source, key, "must be a folder path (a non-empty string)")
        folder = Path(os.path.expandvars(value)).expanduser()
        if not folder.is_absolute() and base_dir is not None:
            folder = base_dir / folder
        return folder
    if key in ("include", "exclude", "species"):
        if isinstance(value, str):
            value = [value]
        if not isinstance(value, list) or not all(isinstance(v, str) and v.strip() for v in value):
            raise ConfigError(source, key, "must be a list of non-empty strings")
        return tuple(v.strip() for v in value)
    if key in ("recursive", "poll", "follow_links_outside"):
        if not isinstance(value, bool):
            raise ConfigError(source, key, "must be true or false")
        return value
    if key == "operator":
        if not isinstance(value, str):
            raise ConfigError(source, key, "must be a string")
        return value.strip()
    if key in ("workers", "memory_limit_mb"):
        if isinstance(value, bool) or not isinstance(value, int):
            raise ConfigError(source, key, "must be a whole number")
        return value
    if key in _SECONDS_KEYS:
        return _seconds(source, key, value)
    if key == "checks":
        if not isinstance(value, dict):
            raise ConfigError(source, key, "must be a table of check thresholds")
        return CheckThresholds.from_mapping(value, source)  # refuses anything but valid thresholds
    raise ConfigError(source, key, "unknown key")


def _cluster_address(source: str | None, value: Any) -> str | None:
    """The [cluster] table: `address` of a Dask scheduler, e.g. "tcp://scheduler:8786"."""
    if not isinstance(value, dict):
        raise ConfigError(source, "cluster", "must be a table ([cluster] with address = \"tcp://host:8786\")")
    for key in value:
        if key not in CLUSTER_KEYS:
            raise ConfigError(source, f"cluster.{key}", f"unknown key (known: {', '.join(CLUSTER_KEYS)})")
    address = value.get("address")
    if address is None:
        return None
    if not isinstance(address, str) or "://" not in address.strip():
        raise ConfigError(source, "cluster.address", f"must be a scheduler address such as \"tcp://host:8786\", got {address!r}")
    return address.strip()


_SECONDS_KEYS = ("settle_seconds", "max_wait_seconds", "rescan_seconds", "timeout_seconds")


def _seconds(source: str | None, key: str, value: Any) -> float:
    """A number of seconds from the file or the command line; anything else is one error line."""
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise ConfigError(source, key, f"must be a finite number of seconds, got {value!r}")
    return float(value)


def validate(config: StationConfig) -> StationConfig:
    """Range checks shared by the file and the command line."""
    source = config.source
    for key in _SECONDS_KEYS:
        _seconds(source, key, getattr(config, key))
    if config.settle_seconds < 0 or config.settle_seconds > 3600:
        raise ConfigError(source, "settle_seconds", "must be between 0 and 3600 s")
    if config.max_wait_seconds < config.settle_seconds:
        raise ConfigError(source, "max_wait_seconds", "must be at least settle_seconds")
    if config.rescan_seconds < 0.1:
        raise ConfigError(source, "rescan_seconds", "must be at least 0.1 s")
    if not 1 <= config.workers <= 64:
        raise ConfigError(source, "workers", "must be between 1 and 64")
    if config.timeout_seconds <= 0 or config.timeout_seconds > 86400:
        raise ConfigError(source, "timeout_seconds", "must be more than 0 s and at most a day")
    if config.memory_limit_mb != 0 and config.memory_limit_mb < 256:
        raise ConfigError(source, "memory_limit_mb", "must be at least 256 MB (0 = no limit)")
    if not isinstance(config.checks, CheckThresholds):
        raise ConfigError(source, "checks", "must be a table of check thresholds")
    if config.species:
        from processing.species import load_library

        try:
            load_library().resolve(config.species)
        except (UnknownSpeciesError, LibraryFileError) as error:
            raise ConfigError(source, "species", str(error)) from None
    if ":" not in config.process_function:
        raise ConfigError(source, "process_function", "must be 'module:function'")
    problem = instrument_problem(config.instrument)
    if problem:
        raise ConfigError(source, "station.instrument", problem)
    if config.ledger_url is not None:
        problem = ledger_url_problem(config.ledger_url)
        if problem:
            raise ConfigError(source, "ledger.url", problem)
    return config


def instrument_problem(name: object) -> str | None:
    """Why `name` cannot be an instrument name, or None: a short printable name."""
    if not isinstance(name, str) or not name.strip():
        return "must be a non-empty name (default: the host name)"
    if len(name) > 64 or any(ord(c) < 32 or ord(c) == 127 for c in name):
        return "must be at most 64 printable characters"
    return None


def ledger_url_problem(url: str) -> str | None:
    """Why `url` cannot name the ledger server, or None. A password in it is refused: the
    configuration and the command line are seen by others (PGPASSWORD or ~/.pgpass instead)."""
    from processing.station.ledger_postgres import is_server_url, password_in_url

    if not is_server_url(url):
        return "must be a postgresql://USER@HOST[:PORT]/DATABASE URL"
    if password_in_url(url):
        return "holds a password; give it in PGPASSWORD or the password file ~/.pgpass (PGPASSFILE) instead"
    return None


def check_folders(config: StationConfig) -> tuple[Path, Path]:
    """The export and data folders, resolved; neither may contain the other (bandwatch never
    writes into the export folder, and would read its own reports back as runs)."""
    if config.export_folder is None:
        raise ConfigError(config.source, "export_folder", "no export folder given (argument DIR or the key)")
    export = config.export_folder.expanduser().resolve()
    data = config.data_folder.expanduser().resolve()
    if not export.is_dir():
        raise ConfigError(config.source, "export_folder", f"{export} is not a folder")
    if data == export or export in data.parents:
        raise ConfigError(
            config.source,
            "data_folder",
            f"{data} is inside the export folder {export}; bandwatch never writes there, "
            "choose a data folder elsewhere",
        )
    if data in export.parents:
        raise ConfigError(
            config.source,
            "export_folder",
            f"{export} is inside the data folder {data}; its reports would be read back as runs, "
            "choose folders side by side",
        )
    return export, data


def station_settings(config: StationConfig, read_policy: ReadPolicy | None = None) -> ProcessSettings:
    """What the station's analyses are given: the expected species (an analysis setting), the
    [checks] thresholds (they judge the run, they change no analysis) and where files may be
    read from."""
    from processing.pipeline import ProcessSettings

    return ProcessSettings(species=config.species, thresholds=config.checks, read_policy=read_policy)


TEMPLATE = """\
# bandwatch station configuration (TOML).
# Every station command reads this file: bandwatch watch, bandwatch ledger ...
# Default location: $BANDWATCH_CONFIG, else ~/.config/bandwatch/station.toml.
# Relative folders are taken relative to this file.

# The folder the spectrometer exports into. bandwatch only reads it, never writes into it.
export_folder = "{export_folder}"

# Where the ledger (ledger.sqlite3) and the reports go. Must be outside the export folder.
data_folder = "{data_folder}"

# Your name, written beside every accept/flag decision.
operator = "{operator}"

# Which files to take (shell patterns on the file name). Names starting with . or ~ and
# *.tmp *.part *.partial *.crdownload *.swp *.lock are always ignored.
include = ["*"]
exclude = []

# Look into subfolders too.
recursive = false

# Follow symbolic links that lead from the export folder to files elsewhere. Off: such links
# are recorded as unreadable. Links into the data folder are never followed.
follow_links_outside = false

# Poll the folder instead of using file-system events (network shares are polled anyway).
poll = false

# A file is taken once its size and time stamp have not changed for this long (seconds).
settle_seconds = 0.5

# A file that still looks incomplete (JCAMP-DX without ##END=) is waited for this long,
# then recorded as unreadable (seconds).
max_wait_seconds = 30

# A full rescan of the folder this often catches anything the events missed (seconds).
rescan_seconds = 5

# Worker processes analysing files, and the limits that protect the station from one bad file.
workers = 2
timeout_seconds = 60
memory_limit_mb = 2048

# Molecules or isotopologues expected in the spectra (empty = detect).
species = []

[station]
# This instrument's name: runs are kept by instrument + file, so several stations can share one
# ledger server. Default: the host name.
# instrument = "ftir-1"

[ledger]
# The ledger is ledger.sqlite3 in the data folder unless a PostgreSQL server is named here
# (pip install 'bandwatch[facility]'). Never put the password here: PGPASSWORD or ~/.pgpass.
# url = "postgresql://bandwatch_station@ledger-host/bandwatch"

# `bandwatch reprocess --cluster` without an address uses this Dask scheduler (needs
# pip install 'bandwatch[cluster]'); uncomment both lines:
# [cluster]
# address = "tcp://scheduler:8786"

# Check thresholds (names and defaults in processing/checks.py, CheckThresholds), e.g.
# calibration_pass_cm1 = 0.05. Only thresholds: finite numbers, a pass limit as strict as its
# warn limit.
[checks]
"""


def render_template(export_folder: str = "/path/to/export", data_folder: str | None = None, operator: str = "") -> str:
    return TEMPLATE.format(
        export_folder=_toml_escape(export_folder),
        data_folder=_toml_escape(data_folder or str(default_data_dir())),
        operator=_toml_escape(operator),
    )


def _toml_escape(text: str) -> str:
    return text.replace("\\", "\\\\").replace('"', '\\"')


def station_config(config_path: str | None, data_dir: str | None = None, ledger_url: str | None = None) -> StationConfig:
    """The configuration a station command uses: --config FILE (or the default file), then
    --data and --ledger."""
    config = load_config(config_path)
    if data_dir:
        config = config.with_overrides(data_folder=Path(data_dir).expanduser())
    if ledger_url:
        problem = ledger_url_problem(ledger_url)
        if problem:
            raise ConfigError("--ledger", "url", problem)
        config = config.with_overrides(ledger_url=ledger_url)
    return config
