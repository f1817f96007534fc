"""Learned oven models on disk: one JSON file per kiln in the data folder.

    DATA/ovens/<kiln name as a file name>.json     (folder 0700, file 0600)

Keyed by the kiln file's `name`, so two kiln files for one oven share what was learned and
two ovens never mix. Written atomically (a temporary file in the same folder, fsync,
rename): a crash mid-write leaves the old model, never half a new one.
"""

from __future__ import annotations

import json
import os
import re
import tempfile
from pathlib import Path

from tuikiln.errors import UserError
from tuikiln.limits import Limits
from tuikiln.ovenmodel import OvenModel
from tuikiln.ovenmodel_plan import LiveForecast
from tuikiln.profile import Profile
from tuikiln.runlog import private_folder

FOLDER = "ovens"


def model_path(data_dir: Path, kiln_name: str) -> Path:
    slug = re.sub(r"[^a-z0-9]+", "-", kiln_name.casefold()).strip("-") or "kiln"
    return data_dir / FOLDER / f"{slug[:80]}.json"


def read_model(path: Path) -> OvenModel:
    """A model file (saved here or given with --model); UserError in one line if not one."""
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise UserError(f"{path}: no such model file (make one with `tuikiln learn RUN "
                        "--save`)") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise UserError(f"{path}: cannot read the model: {getattr(exc, 'strerror', exc)}"
                        ) from None
    try:
        return OvenModel.from_dict(json.loads(text))
    except (ValueError, TypeError) as exc:  # json.JSONDecodeError is a ValueError
        reason = "not JSON" if isinstance(exc, json.JSONDecodeError) else str(exc)
        raise UserError(f"{path}: {reason}: learn it again with `tuikiln learn RUN --save`"
                        ) from None


def saved_model(data_dir: Path, kiln_name: str) -> OvenModel | None:
    """The kiln's saved model, None when none was saved (a damaged one is a UserError)."""
    path = model_path(data_dir, kiln_name)
    return read_model(path) if path.exists() else None


def quiet_saved_model(data_dir: Path, kiln_name: str) -> OvenModel | None:
    """The saved model for screens and the engine: a damaged file counts as none (`plan`
    and `learn` say what is wrong with it)."""
    try:
        return saved_model(data_dir, kiln_name)
    except UserError:
        return None


def save_model(data_dir: Path, kiln_name: str, model: OvenModel) -> Path:
    path = model_path(data_dir, kiln_name)
    try:
        private_folder(path.parent)
        fd, temp = tempfile.mkstemp(dir=path.parent, prefix=".model-", suffix=".tmp")
    except OSError as exc:
        raise UserError(f"cannot save the model in {path.parent}: {exc.strerror or exc}"
                        ) from None
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as out:  # mkstemp makes it 0600
            json.dump(model.as_dict(), out, indent=1)
            out.flush()
            os.fsync(out.fileno())
        os.replace(temp, path)
    except OSError as exc:
        Path(temp).unlink(missing_ok=True)
        raise UserError(f"cannot save the model to {path}: {exc.strerror or exc}") from None
    return path


def live_forecast(data_dir: Path, kiln_name: str, profile: Profile, limits: Limits
                  ) -> LiveForecast | None:
    """The run's times on the kiln's learned oven, None when no model is saved. Never
    raises: a run must start whatever is wrong with a model file."""
    model = quiet_saved_model(data_dir, kiln_name)
    if model is None:
        return None
    try:
        return LiveForecast(profile, model, limits.band, limits)
    except (ValueError, ArithmeticError):
        return None
