"""Reading the small YAML files of noisecal's own layouts (map, configs, camera)."""

from __future__ import annotations

from pathlib import Path

import yaml

from ..errors import InputError


def read_yaml(path: Path, what: str):
    """The parsed document, or a one-line InputError naming the file (and line)."""
    try:
        return yaml.safe_load(Path(path).read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError(f"{path}: no such {what}; check the path") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read the {what} ({exc.__class__.__name__})") from None
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f", line {mark.line + 1}" if mark else ""
        raise InputError(f"{path}{where}: the {what} is not valid YAML; fix the syntax") \
            from None
