"""`tuikiln service`: the systemd unit's hardening, exit codes and the user unit.

Key names and meanings are systemd's own (systemd.exec(5), systemd.service(5),
systemd.kill(5)); the exposure figure is `systemd-analyze security`'s, the reference tool
for it, run offline on the unit file when it is on the machine."""

from __future__ import annotations

import os
import re
import shutil
import subprocess
from pathlib import Path

import pytest

from tuikiln.cli import main
from tuikiln.commands import run as run_command
from tuikiln.commands import service


def _keys(unit: str) -> dict[str, list[str]]:
    keys: dict[str, list[str]] = {}
    for line in unit.splitlines():
        if "=" in line and not line.startswith("#"):
            key, value = line.split("=", 1)
            keys.setdefault(key, []).append(value)
    return keys


def _unit(tmp_path: Path, capsys, *options: str) -> str:
    assert main(["--data", str(tmp_path / "data"), "service", *options]) == 0
    return capsys.readouterr().out


def test_the_system_unit_is_hardened_and_keeps_the_data_folder_writable(tmp_path, capsys):
    unit = _unit(tmp_path, capsys, "--system")
    keys = _keys(unit)
    data = str((tmp_path / "data").resolve())
    assert keys["NoNewPrivileges"] == ["yes"] and keys["PrivateTmp"] == ["yes"]
    assert keys["ProtectSystem"] == ["strict"] and keys["ProtectHome"] == ["read-only"]
    assert keys["ReadWritePaths"] == [data]
    assert (tmp_path / "data").is_dir()  # systemd cannot bind a folder that is not there
    assert keys["CapabilityBoundingSet"] == [""]
    # Serial ports stay reachable through the device filter.
    assert keys["DevicePolicy"] == ["closed"]
    assert {"char-ttyUSB rw", "char-ttyACM rw", "char-ttyS rw"} <= set(keys["DeviceAllow"])
    assert not service.placeholders_left(unit)


def test_exit_codes_and_kill_mode_follow_the_runs_documented_codes(tmp_path, capsys):
    keys = _keys(_unit(tmp_path, capsys, "--system"))
    assert keys["KillMode"] == ["mixed"]  # SIGTERM to the engine only, then the rest killed
    success = {int(code) for code in keys["SuccessExitStatus"][0].split()}
    no_restart = {int(code) for code in keys["RestartPreventExitStatus"][0].split()}
    assert success == {run_command.EXIT_ABORTED}  # a stop or an abort is not a failure
    assert no_restart == {1, run_command.EXIT_ALARM}  # a mistake or an alarm: stay off
    restarted = {run_command.EXIT_CANNOT_START, run_command.EXIT_ENGINE_FAILED}
    assert not restarted & (success | no_restart)


def test_a_kiln_port_under_dev_is_allowed_by_name(tmp_path, capsys):
    kiln = tmp_path / "kiln.toml"
    kiln.write_text('name = "unit test"\nmax = 1100\n[device]\nkind = "modbus"\n'
                    'port = "/dev/ttyXR0"\nmap = "generic-pid"\n')
    system = _keys(_unit(tmp_path, capsys, "--kiln", str(kiln), "--system"))
    assert "/dev/ttyXR0 rw" in system["DeviceAllow"]
    user = _keys(_unit(tmp_path, capsys, "--kiln", str(kiln)))
    # A user's manager cannot filter devices, drop capabilities or add groups.
    for key in ("DeviceAllow", "DevicePolicy", "SupplementaryGroups", "CapabilityBoundingSet",
                "User"):
        assert key not in user
    assert user["ProtectSystem"] == ["strict"] and user["NoNewPrivileges"] == ["yes"]


def test_service_user_writes_the_user_unit(tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("XDG_CONFIG_HOME", str(tmp_path / "config"))
    assert main(["--data", str(tmp_path / "data"), "service", "--user"]) == 0
    out = capsys.readouterr().out
    path = tmp_path / "config" / "systemd" / "user" / "tuikiln.service"
    assert f"Wrote {path}" in out and "systemctl --user" in out
    keys = _keys(path.read_text(encoding="utf-8"))
    assert keys["WantedBy"] == ["default.target"]
    assert main(["--data", str(tmp_path / "data"), "service", "--user"]) == 0
    assert "Wrote" in capsys.readouterr().out  # the same unit again: nothing replaced


def test_user_and_system_together_is_a_one_line_mistake(tmp_path, capsys):
    with pytest.raises(SystemExit) as stopped:
        main(["--data", str(tmp_path), "service", "--user", "--system"])
    assert stopped.value.code == 1
    assert "not allowed with argument" in capsys.readouterr().err


@pytest.mark.skipif(shutil.which("systemd-analyze") is None, reason="systemd-analyze absent")
@pytest.mark.parametrize("options", [("--system",), ()])
def test_systemd_analyze_rates_the_unit_exposure_at_most_5(tmp_path, capsys, options):
    # The target: `systemd-analyze security` exposure <= 5 (0 safe .. 10 unsafe).
    path = tmp_path / "tuikiln.service"
    path.write_text(_unit(tmp_path, capsys, *options), encoding="utf-8")
    env = {**os.environ, "SYSTEMD_COLORS": "0"}
    done = subprocess.run(["systemd-analyze", "security", "--offline=yes", str(path)],
                          capture_output=True, text=True, timeout=60, env=env)
    found = re.search(r"Overall exposure level for \S+: (\d+\.\d+)", done.stdout)
    if found is None:
        pytest.skip(f"this systemd-analyze has no offline security check: {done.stderr[:200]}")
    assert float(found.group(1)) <= 5.0, done.stdout
