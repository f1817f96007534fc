"""The kiln file's `[mqtt]` table and `[[hook]]` entries, checked the way a profile is.

Both checkers never raise: they return what they could build and a list of problems, each a
key path (such as ("mqtt", "port") or ("hook", 0, "run")) and plain words; the kiln file
loader turns a key path into a line number.

The MQTT password never lives in the kiln file, because the kiln file is copied into every
run log. It comes from `password_file` or from an environment variable (`password_env`,
default TUIKILN_MQTT_PASSWORD) and is read only when the publisher connects.
"""

from __future__ import annotations

import os
import re
import shutil
import stat
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from tuikiln import events as ev
from tuikiln.drivers.checking import Setting, check_table, suggest
from tuikiln.units import parse_duration

Problems = list[tuple[tuple, str]]

DEFAULT_PASSWORD_ENV = "TUIKILN_MQTT_PASSWORD"
DEFAULT_PREFIX = "tuikiln"
DEFAULT_DISCOVERY_PREFIX = "homeassistant"
DEFAULT_HOOK_TIMEOUT = 30.0

# The declared keys of [mqtt] (tuikiln.drivers.checking checks them); `any` keys are checked
# by code in `_check_mqtt` (files that must exist, topics, the id).
MQTT: tuple[Setting, ...] = (
    Setting("host", "text", strip=True, example='"127.0.0.1"',
            missing='"host" is missing: write host = "..."'),
    Setting("port", "whole", None, 1, 65535),
    Setting("username", "text", strip=True, example='"kiln"'),
    Setting("password_file"),
    Setting("password_env", "text", DEFAULT_PASSWORD_ENV, strip=True,
            example=f'"{DEFAULT_PASSWORD_ENV}"'),
    Setting("tls"), Setting("tls_cert"), Setting("tls_key"),
    Setting("prefix", "text", DEFAULT_PREFIX, strip=True, example=f'"{DEFAULT_PREFIX}"'),
    Setting("id", "text", strip=True, example='"bench-oven"'),
    Setting("readings", "flag", True),
    Setting("discovery", "flag", False),
    Setting("discovery_prefix", "text", DEFAULT_DISCOVERY_PREFIX, strip=True,
            example=f'"{DEFAULT_DISCOVERY_PREFIX}"'),
    Setting("commands", "flag", False),
    Setting("keepalive", "whole", 30, 2, 3600),
)
# Keys people reach for that would put a secret into the kiln file (and so into run logs).
_SECRET_KEYS = ("password", "passwd", "pass", "pw", "secret", "token")
HOOK: tuple[Setting, ...] = (Setting("on"), Setting("run"), Setting("timeout"))

# Groups a hook's `on` may name besides single event kinds.
ALL_KINDS: tuple[str, ...] = (
    ev.RUN_START, ev.RUN_END, ev.STEP_START, ev.STEP_END, ev.STEP_STATE, ev.EQUALIZED,
    ev.ALARM_RAISED, ev.ALARM_ACKNOWLEDGED, ev.ALARM_CLEARED, ev.OPERATOR_NEEDED,
    ev.OPERATOR_ACKNOWLEDGED, ev.NOTE, ev.COMMAND, ev.COMMAND_REFUSED, ev.SAFE_STATE, ev.GAP,
    ev.DEVICE, ev.ALERT_FAILED,
)
HOOK_GROUPS: dict[str, frozenset[str]] = {
    # Something is wrong with the oven or the run: someone should look.
    "alarm": frozenset({ev.ALARM_RAISED, ev.SAFE_STATE}),
    # The run waits for a person (e.g. "quench now").
    "operator": frozenset({ev.OPERATOR_NEEDED}),
    # The run is over, however it ended (detail "outcome" says how).
    "end": frozenset({ev.RUN_END}),
    "all": frozenset(ALL_KINDS),
}
PLACEHOLDERS = ("kiln", "event", "message", "temperature", "severity", "run", "step")

_ID_RE = re.compile(r"^[a-z0-9-]+$")
_PLACEHOLDER_RE = re.compile(r"\{\{|\}\}|\{([^{}]*)\}|[{}]")


@dataclass(frozen=True)
class MqttSettings:
    host: str
    port: int = 1883
    username: str | None = None
    password_file: str | None = None
    """Absolute path (resolved against the kiln file's folder)."""
    password_env: str = DEFAULT_PASSWORD_ENV
    tls: str | bool = False
    """False, True (the system's trusted CAs), or the path of a CA file."""
    tls_cert: str | None = None
    tls_key: str | None = None
    prefix: str = DEFAULT_PREFIX
    id: str = "kiln"
    kiln_name: str = "kiln"
    readings: bool = True
    discovery: bool = False
    discovery_prefix: str = DEFAULT_DISCOVERY_PREFIX
    commands: bool = False
    keepalive: int = 30

    @property
    def base_topic(self) -> str:
        return f"{self.prefix}/{self.id}"

    def topic(self, leaf: str) -> str:
        return f"{self.base_topic}/{leaf}"


def read_password(settings: MqttSettings) -> str | None:
    """The password, read when connecting (so it never sits in a settings object or log).

    Raises OSError when the password file cannot be read.
    """
    if settings.password_file:
        problem = password_file_problem(settings.password_file)
        if problem:
            raise PermissionError(problem)
        try:
            with open(settings.password_file, encoding="utf-8") as handle:
                return handle.read().strip("\r\n")
        except UnicodeDecodeError:
            pass
        # Raised outside the handler: the decode error quotes the password's bytes, and
        # it must not even ride along as the context of this one.
        raise OSError(f"the password file {settings.password_file} is not UTF-8 text")
    return os.environ.get(settings.password_env)


def password_file_problem(path: str) -> str | None:
    """Why a password file must not be used (others may read it), or None."""
    try:
        info = os.stat(path)
    except OSError as exc:
        return f"cannot read the password file {path}: {exc.strerror or exc}"
    if info.st_mode & 0o077:
        return (f"the password file {path} can be read by other users (mode "
                f"{stat.S_IMODE(info.st_mode):o}): `chmod 600 {path}` first")
    return None


def kiln_id(name: str) -> str:
    """'Bench Oven #2' -> 'bench-oven-2' (lowercase, [a-z0-9-], never empty)."""
    slug = re.sub(r"[^a-z0-9]+", "-", str(name).lower()).strip("-")
    return slug or "kiln"


def _resolve_path(text: str, base_dir: str) -> str:
    path = os.path.expanduser(text)
    return path if os.path.isabs(path) else os.path.normpath(os.path.join(base_dir, path))


def _readable_file(
    value: Any, key: str, base_dir: str, path: tuple, problems: Problems
) -> str | None:
    if not isinstance(value, str) or not value.strip():
        problems.append((path, f'"{key}" must be the path of a file, in quotes'))
        return None
    resolved = _resolve_path(value, base_dir)
    if not os.path.isfile(resolved):
        problems.append((path, f'"{key}": no such file: {resolved}'))
        return None
    if not os.access(resolved, os.R_OK):
        problems.append((path, f'"{key}": tuikiln cannot read {resolved} (permission denied)'))
        return None
    return resolved


def check_mqtt_settings(
    table: Mapping, kiln_name: str, base_dir: str
) -> tuple[MqttSettings | None, Problems]:
    """Check the kiln file's `[mqtt]` table; (settings or None, problems). Never raises."""
    try:
        return _check_mqtt(table, kiln_name, base_dir)
    except Exception as exc:  # a checker must never crash the loader
        return None, [(("mqtt",), f"cannot check this table: {exc}")]


def _check_mqtt(
    table: Mapping, kiln_name: str, base_dir: str
) -> tuple[MqttSettings | None, Problems]:
    root = ("mqtt",)
    if not isinstance(table, Mapping):
        return None, [(root, '"mqtt" must be a table: write [mqtt] and its keys below it')]
    problems: Problems = []
    for key in table:
        if str(key).lower() in _SECRET_KEYS:
            problems.append(((*root, key), (
                f'"{key}" is not allowed here: the kiln file is copied into every run log, so '
                f'a password must not be in it. Put it in a file of its own and write '
                f'password_file = "~/.config/tuikiln/mqtt.pass", or set the environment '
                f"variable {DEFAULT_PASSWORD_ENV}"
            )))
    values = check_table({k: v for k, v in table.items() if str(k).lower() not in _SECRET_KEYS},
                         MQTT, root, problems)
    for key in ("password_file", "tls", "tls_cert", "tls_key"):
        values.pop(key)  # set below, by the checks that need code
    values["host"] = values["host"] or ""
    if "password_env" in table and values["password_env"] != DEFAULT_PASSWORD_ENV:
        if not re.match(r"^[A-Za-z_][A-Za-z0-9_]*$", values["password_env"]):
            problems.append(((*root, "password_env"), '"password_env" must be the name of an '
                             "environment variable, such as TUIKILN_MQTT_PASSWORD"))
    if "password_file" in table:
        values["password_file"] = _readable_file(
            table["password_file"], "password_file", base_dir, (*root, "password_file"), problems
        )
        problem = values["password_file"] and password_file_problem(values["password_file"])
        if problem:
            problems.append(((*root, "password_file"), problem))
            values["password_file"] = None
        if "password_env" in table:
            problems.append(((*root, "password_env"), 'write either "password_file" or '
                             '"password_env", not both'))
    if ("password_file" in table or "password_env" in table) and not values["username"]:
        problems.append(((*root, "username"), 'a password is set up but "username" is missing'))

    tls = table.get("tls", False)
    if isinstance(tls, bool):
        values["tls"] = tls
    else:
        values["tls"] = _readable_file(tls, "tls", base_dir, (*root, "tls"), problems) or False
    for key in ("tls_cert", "tls_key"):
        if key in table:
            values[key] = _readable_file(table[key], key, base_dir, (*root, key), problems)
    if ("tls_cert" in table) != ("tls_key" in table):
        missing = "tls_key" if "tls_cert" in table else "tls_cert"
        problems.append(((*root, missing), f'a client certificate needs both "tls_cert" and '
                         f'"tls_key": "{missing}" is missing'))
    if ("tls_cert" in table or "tls_key" in table) and table.get("tls", False) is False:
        problems.append(((*root, "tls"), 'a client certificate needs TLS: set tls = true '
                         '(the system\'s trusted CAs) or tls = "path/to/ca.crt"'))
    if values["port"] is None:
        values["port"] = 8883 if values["tls"] else 1883

    for key, default in (("prefix", DEFAULT_PREFIX),
                         ("discovery_prefix", DEFAULT_DISCOVERY_PREFIX)):
        value = values[key]
        if value is not None:
            if any(c in value for c in "+#\0") or value.startswith("/") or value.endswith("/"):
                problems.append(((*root, key), f'"{key}" must be a topic without "+", "#" or a '
                                 f'leading or trailing "/", such as "{default}"'))
    if "id" in table:
        value = values["id"]
        if value is not None and not _ID_RE.match(value):
            problems.append(((*root, "id"),
                             f'"id" may hold only a-z, 0-9 and "-": try "{kiln_id(value)}"'))
        values["id"] = value or kiln_id(kiln_name)
    else:
        values["id"] = kiln_id(kiln_name)

    if values["commands"] and not values["username"]:
        problems.append(((*root, "commands"), (
            'commands = true needs a login: remote commands are accepted only over an '
            'authenticated connection, so set "username" (and password_file) first'
        )))
    if problems:
        return None, problems
    given = {k: v for k, v in values.items() if v is not None}
    return MqttSettings(kiln_name=str(kiln_name), **given), []


@dataclass(frozen=True)
class HookSpec:
    index: int
    """Position in the kiln file (0-based), for messages."""
    on: frozenset[str]
    """Event kinds that run this hook (groups already expanded)."""
    run: tuple[str, ...]
    """Program and arguments; placeholders are filled in per event, never through a shell."""
    timeout: float = DEFAULT_HOOK_TIMEOUT

    @property
    def label(self) -> str:
        return f"hook {self.index + 1} ({os.path.basename(self.run[0])})"


def placeholders_in(argument: str) -> tuple[list[str], list[str]]:
    """(placeholder names used, problems) for one argument; `{{` and `}}` are literal braces."""
    names: list[str] = []
    problems: list[str] = []
    for match in _PLACEHOLDER_RE.finditer(argument):
        token = match.group(0)
        if token in ("{{", "}}"):
            continue
        if match.group(1) is None:
            problems.append(f'a lone "{token}": write "{token}{token}" for a literal brace')
            continue
        name = match.group(1).strip()
        if name not in PLACEHOLDERS:
            choices = ", ".join("{" + p + "}" for p in PLACEHOLDERS)
            problems.append(f'unknown placeholder "{{{name}}}"{suggest(name, PLACEHOLDERS)}; '
                            f"known: {choices}")
        else:
            names.append(name)
    return names, problems


def fill_placeholders(argument: str, values: Mapping[str, str]) -> str:
    """Fill one argument. The result is always exactly one argument, whatever the values hold."""

    def replace(match: re.Match[str]) -> str:
        token = match.group(0)
        if token == "{{":
            return "{"
        if token == "}}":
            return "}"
        if match.group(1) is None:
            return token
        return values.get(match.group(1).strip(), "")

    return _PLACEHOLDER_RE.sub(replace, argument)


def check_hooks(entries: Any, base_dir: str) -> tuple[list[HookSpec], Problems]:
    """Check the kiln file's `[[hook]]` entries; (hooks, problems). Never raises."""
    try:
        return _check_hooks(entries, base_dir)
    except Exception as exc:
        return [], [(("hook",), f"cannot check the hooks: {exc}")]


def _check_hooks(entries: Any, base_dir: str) -> tuple[list[HookSpec], Problems]:
    if not isinstance(entries, list):
        return [], [(("hook",), 'hooks are written as [[hook]] tables, one per hook')]
    hooks: list[HookSpec] = []
    problems: Problems = []
    known_on = tuple(HOOK_GROUPS) + ALL_KINDS
    for index, entry in enumerate(entries):
        root: tuple = ("hook", index)
        if not isinstance(entry, Mapping):
            problems.append((root, "each [[hook]] must be a table with on = [...] and run = [...]"))
            continue
        before = len(problems)
        check_table(entry, HOOK, root, problems)

        kinds: set[str] = set()
        on = entry.get("on")
        if isinstance(on, str):
            on = [on]
        if on is None:
            problems.append(((*root, "on"), '"on" is missing: say which events run this hook, '
                             'e.g. on = ["alarm", "operator", "end"]'))
        elif not isinstance(on, list) or not on or not all(isinstance(x, str) for x in on):
            problems.append(((*root, "on"), '"on" must be a list of event kinds or groups, '
                             'e.g. on = ["alarm", "end"]'))
        else:
            for name in on:
                if name in HOOK_GROUPS:
                    kinds |= HOOK_GROUPS[name]
                elif name in ALL_KINDS:
                    kinds.add(name)
                else:
                    problems.append(((*root, "on"), (
                        f'"{name}" is not an event kind or group{suggest(name, known_on)}; '
                        f'groups: {", ".join(HOOK_GROUPS)}'
                    )))

        run = entry.get("run")
        program: tuple[str, ...] = ()
        if run is None:
            problems.append(((*root, "run"), '"run" is missing: write the program and its '
                             'arguments as a list, e.g. run = ["notify-send", "{message}"]'))
        elif isinstance(run, str):
            problems.append(((*root, "run"), (
                '"run" must be a list of arguments such as ["curl", "-d", "{message}", "URL"], '
                "not one string: tuikiln never runs hooks through a shell"
            )))
        elif not isinstance(run, list) or not run or not all(isinstance(x, str) for x in run):
            problems.append(((*root, "run"), '"run" must be a non-empty list of text arguments'))
        elif not run[0].strip() or "{" in run[0]:
            problems.append(((*root, "run", 0), "the first argument must name the program, "
                             "without placeholders"))
        else:
            program = (_program_path(run[0], base_dir), *run[1:])
            if not _program_exists(program[0]):
                problems.append(((*root, "run", 0), f'no such program: "{run[0]}" '
                                 "(not found, or not executable)"))
            for position, argument in enumerate(run[1:], start=1):
                for message in placeholders_in(argument)[1]:
                    problems.append(((*root, "run", position), message))

        timeout = DEFAULT_HOOK_TIMEOUT
        if "timeout" in entry:
            try:
                timeout = parse_duration(entry["timeout"])
                if not 0 < timeout <= 3600:
                    raise ValueError('"timeout" must be more than 0 and at most 1h')
            except ValueError as exc:
                problems.append(((*root, "timeout"), str(exc)))
        if len(problems) == before:
            hooks.append(HookSpec(index=index, on=frozenset(kinds), run=program, timeout=timeout))
    return hooks, problems


def _program_path(program: str, base_dir: str) -> str:
    # A bare name is looked up on PATH when it runs; a path is relative to the kiln file.
    if "/" in program or program.startswith("~"):
        return _resolve_path(program, base_dir)
    return program


def _program_exists(program: str) -> bool:
    if os.path.isabs(program):
        return os.path.isfile(program) and os.access(program, os.X_OK)
    return shutil.which(program) is not None
