"""``tune --study-copy PATH``: a copy of the study file with tune's winning setting added as a
recipe, written atomically, checked to load, and never over the original.

The copy is the original text with the recipe block inserted under the top-level ``recipes:``
line, so comments and layout survive; where the recipes are not written as an indented block
the copy is the study's mapping written out again (comments lost; the copy says so in its
first line).
"""

from __future__ import annotations

import os
import re
from pathlib import Path
from typing import Any

import yaml

from noiselab.common.atomic import atomic_path
from noiselab.common.errors import InputError, arg, input_error
from noiselab.common.reading import read_input_text
from noiselab.common.shipped import looks_like_name, shipped_path
from noiselab.common.yamlio import MAX_YAML_BYTES, parse_yaml_mapping
from noiselab.study.spec import load_study

#: the copy's argument (``copy``; the command line shows ``--study-copy``)
OPTION = arg("copy")
_RECIPES_LINE = re.compile(r"^recipes:[ \t]*(#.*)?$", re.MULTILINE)


def study_file(path: str | Path) -> Path:
    """The study file ``path`` names (a path, or a shipped study's name), as load_study reads."""
    p = Path(path)
    if not p.exists() and looks_like_name(str(path)):
        p = shipped_path("studies", str(path), str(path), "study")
    return p


def check_copy_target(study: str | Path, copy: str | Path) -> Path:
    """``copy`` as a Path, refused in one line (before any work) when it is the study file
    itself, a folder, or in a folder that does not exist."""
    target = Path(copy).expanduser()
    original = study_file(study)
    if target.exists() and original.exists() and os.path.samefile(target, original):
        raise input_error(
            None, OPTION, f"{target} is the study file itself", "a new path (the original stays)"
        )
    if target.is_dir():
        raise input_error(None, OPTION, f"{target} is a folder", "a file path ending in .yaml")
    if not target.absolute().parent.is_dir():
        raise input_error(
            None, OPTION, f"folder {target.absolute().parent} does not exist", "an existing folder"
        )
    return target


def _free_name(recipes: dict[str, Any], name: str) -> str:
    if name not in recipes:
        return name
    i = 2
    while f"{name}_{i}" in recipes:
        i += 1
    return f"{name}_{i}"


def tuned_study_text(result: Any, text: str, source: str, rank: int = 1) -> tuple[str, str]:
    """(copy's text, recipe name): ``text`` (a study file) with the setting of ``rank`` added
    under ``recipes:`` as ``tuned`` (``tuned_2``, ... when taken)."""
    data = parse_yaml_mapping(text, source, "study file")
    recipes = dict(data.get("recipes") or {})
    name = _free_name(recipes, "tuned")
    block = result.recipe_yaml(rank, name)
    wanted = parse_yaml_mapping("recipes:\n" + block + "\n", source)["recipes"][name]
    match = _RECIPES_LINE.search(text)
    if match is not None:
        cut = match.end()
        inserted = text[:cut] + "\n" + block + text[cut:]
        try:
            got = parse_yaml_mapping(inserted, source, "study file")
        except InputError:
            got = {}
        expected = {**data, "recipes": {**recipes, name: wanted}}
        if got == expected:
            return inserted, name
    data["recipes"] = {**recipes, name: wanted}
    note = f"# {Path(source).name} with tune's rank-{rank} setting added as recipe {name!r}\n"
    return note + yaml.safe_dump(data, sort_keys=False, allow_unicode=True), name


def write_tuned_study(result: Any, study: str | Path, copy: str | Path, rank: int = 1) -> Path:
    """Write the study ``study`` with tune's setting of ``rank`` added as a recipe to ``copy``
    (atomically; refused when ``copy`` is the study itself). The copy must load as a study
    from where it is written (relative paths in it are relative to the copy); otherwise
    nothing is written and the one-line error says why. Returns the path."""
    target = check_copy_target(study, copy)
    original = study_file(study)
    text = read_input_text(original, "study file", MAX_YAML_BYTES)
    new_text, _ = tuned_study_text(result, text, str(original), rank)
    with atomic_path(target) as tmp:
        tmp.write_text(new_text, encoding="utf-8")
        try:
            load_study(tmp)
        except InputError as exc:
            problem = str(exc).replace(str(tmp), str(target))
            raise InputError(
                f"{OPTION}: the copy would not load ({problem}); allowed: a path from which "
                "the study's relative file paths still resolve (e.g. beside the original)"
            ) from None
    return target
