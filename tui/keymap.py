"""The user's key remapping: a TOML file of binding id = "keys" (e.g. `"run.accept" = "y"`).

Read from $BANDWATCH_KEYS, else $XDG_CONFIG_HOME/bandwatch/keys.toml (~/.config/...). Each id
is one of the interface's binding ids (the help screen lists them); keys use Textual's key
names, comma-separated for alternatives ("down,j").
"""
from __future__ import annotations

import os
import tomllib
from pathlib import Path

from processing.errors import ConfigError
from tui.bindings import binding_ids


def keymap_path() -> Path:
    """$BANDWATCH_KEYS, else keys.toml beside the station configuration."""
    from processing.station.config import config_home

    explicit = os.environ.get("BANDWATCH_KEYS")
    if explicit:
        return Path(explicit).expanduser()
    return config_home() / "keys.toml"


def load_keymap(path: str | Path | None = None) -> dict[str, str]:
    """binding id -> keys; {} when there is no file. Raises ConfigError naming the file and id."""
    chosen = Path(path) if path is not None else keymap_path()
    if not chosen.exists():
        return {}
    try:
        with open(chosen, "rb") as handle:
            table = tomllib.load(handle)
    except tomllib.TOMLDecodeError as error:
        raise ConfigError(chosen, "file", f"not valid TOML ({error})") from None
    except OSError as error:
        raise ConfigError(chosen, "file", f"cannot be read ({error.strerror or error})") from None
    known = binding_ids()
    keymap: dict[str, str] = {}
    for binding_id, keys in table.items():
        if binding_id not in known:
            raise ConfigError(chosen, binding_id, f"unknown key id (known: {', '.join(sorted(known))})")
        if not isinstance(keys, str) or not keys.strip() or any(not k.strip() for k in keys.split(",")):
            raise ConfigError(chosen, binding_id, 'must be key names, e.g. "y" or "down,j"')
        keymap[binding_id] = keys.replace(" ", "")
    return keymap
