"""Station configuration: the template reads back, bad values name their key, folder rules."""
from __future__ import annotations

from pathlib import Path

import pytest

from processing.checks import CheckThresholds
from processing.errors import ConfigError
from processing.station.config import (
    StationConfig,
    check_folders,
    config_from_table,
    default_config_path,
    default_data_dir,
    load_config,
    render_template,
    station_settings,
)


def test_template_reads_back_with_the_values_written(tmp_path: Path) -> None:
    path = tmp_path / "station.toml"
    path.write_text(render_template(str(tmp_path / "exp"), str(tmp_path / "data"), "ana"), encoding="utf-8")
    config = load_config(path)
    assert config.export_folder == tmp_path / "exp"
    assert config.data_folder == tmp_path / "data"
    assert config.operator == "ana"
    # the documented defaults (the template repeats them)
    assert (config.settle_seconds, config.workers, config.timeout_seconds, config.memory_limit_mb) == (0.5, 2, 60.0, 2048)
    assert (config.include, config.exclude, config.recursive, config.poll) == (("*",), (), False, False)
    assert config.checks == CheckThresholds() and config.species == ()


@pytest.mark.parametrize(
    ("line", "key"),
    [
        ('workers = "two"', "workers"),
        ("workers = 0", "workers"),
        ("settle_seconds = -1", "settle_seconds"),
        ("recursive = 1", "recursive"),
        ("include = [1, 2]", "include"),
        ("memory_limit_mb = 10", "memory_limit_mb"),
        ("timeout_seconds = 0", "timeout_seconds"),
        ("colour = true", "colour"),
        ('checks = "strict"', "checks"),
        ('export_folder = ""', "export_folder"),
    ],
)
def test_bad_value_is_one_error_naming_the_key(tmp_path: Path, line: str, key: str) -> None:
    path = tmp_path / "station.toml"
    path.write_text(line + "\n", encoding="utf-8")
    with pytest.raises(ConfigError) as caught:
        load_config(path)
    message = str(caught.value)
    assert caught.value.key == key
    assert message.startswith(f"{path}: {key}: ") and "\n" not in message


def test_broken_toml_and_missing_file_are_clear(tmp_path: Path) -> None:
    path = tmp_path / "station.toml"
    path.write_text("workers = = 2\n", encoding="utf-8")
    with pytest.raises(ConfigError, match="not valid TOML"):
        load_config(path)
    with pytest.raises(ConfigError, match="no such configuration file"):
        load_config(tmp_path / "absent.toml")


def test_default_locations_follow_the_environment(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("BANDWATCH_CONFIG", str(tmp_path / "mine.toml"))
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "share"))
    assert default_config_path() == tmp_path / "mine.toml"
    assert default_data_dir() == tmp_path / "share" / "bandwatch"
    # an absent default file is not an error: the defaults apply
    assert load_config().workers == 2
    monkeypatch.delenv("BANDWATCH_CONFIG")
    monkeypatch.setenv("XDG_CONFIG_HOME", str(tmp_path / "cfg"))
    assert default_config_path() == tmp_path / "cfg" / "bandwatch" / "station.toml"


def test_relative_folders_are_relative_to_the_file(tmp_path: Path) -> None:
    config = config_from_table({"export_folder": "exp", "data_folder": "../d"}, "x.toml", tmp_path / "etc")
    assert config.export_folder == tmp_path / "etc" / "exp"
    assert config.data_folder == tmp_path / "etc" / ".." / "d"


def test_data_folder_inside_export_folder_is_refused(tmp_path: Path) -> None:
    export = tmp_path / "export"
    export.mkdir()
    for data in (export, export / "bandwatch", export / "a" / "b"):
        with pytest.raises(ConfigError, match="inside the export folder") as caught:
            check_folders(StationConfig(export_folder=export, data_folder=data))
        assert caught.value.key == "data_folder"
    assert check_folders(StationConfig(export_folder=export, data_folder=tmp_path / "data"))[1] == tmp_path / "data"
    with pytest.raises(ConfigError, match="not a folder"):
        check_folders(StationConfig(export_folder=tmp_path / "absent", data_folder=tmp_path / "data"))
    with pytest.raises(ConfigError, match="no export folder"):
        check_folders(StationConfig(data_folder=tmp_path / "data"))


def test_overrides_are_validated_and_checks_pass_through() -> None:
    config = StationConfig().with_overrides(workers=3, settle_seconds=None)
    assert (config.workers, config.settle_seconds) == (3, 0.5)
    with pytest.raises(ConfigError, match="workers"):
        StationConfig().with_overrides(workers=0)
    tuned = config_from_table({"checks": {"calibration_pass_cm1": 0.1, "snr_warn": 8}, "species": ["HCl"]})
    settings = station_settings(tuned)
    assert (settings.thresholds.calibration_pass_cm1, settings.thresholds.snr_warn) == (0.1, 8.0)
    assert settings.thresholds.snr_pass == 30.0 and settings.species == ("HCl",)
    assert settings.threshold_sigma == 5.0  # [checks] sets thresholds of checks, nothing else


@pytest.mark.parametrize(
    ("line", "key"),
    [
        ("settle_seconds = nan", "settle_seconds"),
        ("timeout_seconds = inf", "timeout_seconds"),
        ("max_wait_seconds = -inf", "max_wait_seconds"),
        ("rescan_seconds = nan", "rescan_seconds"),
        ("[checks]\nsnr_pass = nan", "checks.snr_pass"),
        ("[checks]\ncalibration_warn_cm1 = inf", "checks.calibration_warn_cm1"),
        ("[checks]\nsnr_warn = -3", "checks.snr_warn"),
        ('[checks]\nsnr_pass = "high"', "checks.snr_pass"),
        ("[checks]\nsnr_pass = 5", "checks.snr_pass"),  # below snr_warn (10): pass easier than warn
        ("[checks]\ntemperature_min_K = 400", "checks.temperature_min_K"),  # above the maximum
        # [checks] holds thresholds only: an analysis setting is refused, not passed on
        ("[checks]\nthreshold_sigma = 1.0", "checks.threshold_sigma"),
        ("[checks]\nmax_bytes = 1", "checks.max_bytes"),
        ("[checks]\n[checks.nested]\nx = 1", "checks.nested"),
        # every other key: unknown names (a misspelling, a table) and bad values, one line each
        ("setle_seconds = 0.5", "setle_seconds"),
        ("[station]\nworkers = 2", "station.workers"),  # [station] holds the instrument's name only
        ('station = "ftir-1"', "station"),
        ('[station]\ninstrument = ""', "station.instrument"),
        ('[station]\ninstrument = "ftir\\u001b[2J"', "station.instrument"),  # no control characters
        ('[ledger]\nurl = "mysql://db/bandwatch"', "ledger.url"),
        ('[ledger]\nurl = "postgresql://station:s3cret@db/bandwatch"', "ledger.url"),  # never a password
        ('[ledger]\nurl = "postgresql://station@db/bandwatch?password=s3cret"', "ledger.url"),
        ('[ledger]\nhost = "db"', "ledger.host"),
        ('workers = "two"', "workers"),
        ("recursive = 1", "recursive"),
        ('include = "*.csv"\nexclude = [1]', "exclude"),
        ("operator = 7", "operator"),
        ('species = ["HCl", "HCx"]', "species"),  # not in the library: said at start, not per file
    ],
)
def test_unknown_keys_bad_values_and_anything_but_thresholds_in_checks_are_refused_at_start(
    tmp_path: Path, line: str, key: str
) -> None:
    path = tmp_path / "station.toml"
    path.write_text(line + "\n", encoding="utf-8")
    with pytest.raises(ConfigError) as caught:
        load_config(path)
    assert caught.value.key == key and "\n" not in str(caught.value)


def test_non_finite_times_from_the_command_line_are_refused() -> None:
    with pytest.raises(ConfigError, match="settle_seconds"):
        StationConfig().with_overrides(settle_seconds=float("nan"))
    with pytest.raises(ConfigError, match="timeout_seconds"):
        StationConfig().with_overrides(timeout_seconds=float("inf"))


def test_an_export_folder_inside_the_data_folder_is_refused(tmp_path: Path) -> None:
    """Reports written into the data folder would land in the export folder and come back as runs."""
    data = tmp_path / "data"
    (data / "reports").mkdir(parents=True)
    with pytest.raises(ConfigError, match="inside the data folder") as caught:
        check_folders(StationConfig(export_folder=data / "reports", data_folder=data))
    assert caught.value.key == "export_folder"
    with pytest.raises(ConfigError, match="inside the export folder"):  # the same folder
        check_folders(StationConfig(export_folder=data, data_folder=data))


def test_instrument_and_ledger_server_read_back(tmp_path: Path) -> None:
    import socket

    path = tmp_path / "station.toml"
    path.write_text(render_template(str(tmp_path / "exp"), str(tmp_path / "data"), "ana"), encoding="utf-8")
    plain = load_config(path)
    # the defaults: the host name, and the data folder's SQLite file
    assert plain.instrument == socket.gethostname() and plain.ledger_url is None
    assert plain.ledger_location == tmp_path / "data"
    text = path.read_text(encoding="utf-8").replace('# instrument = "ftir-1"', 'instrument = "ftir-2"')
    text = text.replace('# url = "postgresql://', 'url = "postgresql://')
    path.write_text(text, encoding="utf-8")
    configured = load_config(path)
    assert configured.instrument == "ftir-2"
    assert configured.ledger_location == configured.ledger_url == "postgresql://bandwatch_station@ledger-host/bandwatch"


def test_a_password_on_the_command_line_is_refused_without_repeating_it(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    from processing.station.config import station_config

    monkeypatch.setenv("BANDWATCH_CONFIG", str(tmp_path / "none.toml"))
    with pytest.raises(ConfigError) as caught:
        station_config(None, None, "postgresql://station:s3cret@db/bw")
    assert "s3cret" not in str(caught.value) and "PGPASSWORD" in str(caught.value)
    assert station_config(None, None, "postgresql://station@db/bw").ledger_url == "postgresql://station@db/bw"
