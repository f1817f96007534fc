"""Print every dependency of tuikiln pinned to its declared lower bound, one a line.

The CI's lowest-versions job (.ci/run) installs these pins, so the bounds in pyproject.toml
are what is tested: a bound raised or lowered there changes the job at once and cannot drift.
A requirement without a `>=` bound is printed as it stands. Where one name is bounded twice
(the runtime list and an extra), the higher bound is the lowest that satisfies both.

    python tests/lowest_versions.py [EXTRA ...]      # default extra: test
    python tests/lowest_versions.py --runtime        # the runtime dependencies alone
"""

from __future__ import annotations

import re
import sys
import tomllib
from pathlib import Path

PYPROJECT = Path(__file__).resolve().parent.parent / "pyproject.toml"
# name, optional [extras], then the specifiers (PEP 508, without markers: we use none).
_REQUIREMENT = re.compile(r"^\s*([A-Za-z0-9][A-Za-z0-9._-]*)\s*(\[[^\]]*\])?\s*(.*)$")


def _version_key(version: str) -> tuple[int, ...]:
    return tuple(int(part) for part in re.findall(r"\d+", version))


def lower_bound(specifiers: str) -> str | None:
    """The version after `>=` in a specifier list, or None if there is no such bound."""
    for spec in specifiers.split(","):
        spec = spec.strip()
        if spec.startswith(">="):
            return spec[2:].strip()
    return None


def _normal(name: str) -> str:
    return re.sub(r"[-_.]+", "-", name).lower()  # PEP 503 name normalisation


def pins(pyproject: dict, extras: list[str]) -> list[str]:
    project = pyproject["project"]
    requirements = list(project.get("dependencies", []))
    for extra in extras:
        requirements += project.get("optional-dependencies", {}).get(extra, [])
    chosen: dict[str, tuple[str, str | None, str]] = {}  # normal name -> name, bound, line
    for line in requirements:
        match = _REQUIREMENT.match(line)
        if match is None:
            raise ValueError(f"cannot read the requirement {line!r}")
        name, _extras, specifiers = match.groups()
        bound = lower_bound(specifiers)
        key = _normal(name)
        previous = chosen.get(key)
        if previous is None or (bound is not None and (
                previous[1] is None or _version_key(bound) > _version_key(previous[1]))):
            chosen[key] = (name, bound, line.strip())
    return [f"{name}=={bound}" if bound else line for name, bound, line in chosen.values()]


def main(argv: list[str]) -> int:
    extras = [] if argv == ["--runtime"] else (argv or ["test"])
    with PYPROJECT.open("rb") as handle:
        print("\n".join(pins(tomllib.load(handle), extras)))
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
