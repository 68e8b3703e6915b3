"""``sweep init PATH``: write a commented starter sweep definition to edit.

The starter (``sweep/data/starter.toml``) runs as it is: the planet-yield model in Saltelli mode
on an invented neighbourhood of stars, the SAG13 occurrence rates with shared uncertainty, a Bond
albedo prior with an uncertain hyperparameter, one invented coronagraph and one invented nulling
interferometer, category axes and criteria, and execution defaults. Every key carries a comment
with its meaning and unit.
"""

from __future__ import annotations

import re
import shlex
from importlib.resources import files
from pathlib import Path

from sweep.errors import UserInputError

#: The packaged starter template.
STARTER = "data/starter.toml"
#: The template's ``[run] name`` line, replaced by the new file's stem when that is a valid name.
_NAME_LINE = re.compile(r'^name = "starter"', re.MULTILINE)
_VALID_NAME = re.compile(r"^[A-Za-z0-9_.-]+$")


def add_parser(subparsers) -> None:
    """Declare ``sweep init``."""
    parser = subparsers.add_parser(
        "init",
        help="write a commented starter sweep definition (invented stars and instruments)",
        description=(
            "Write a starter sweep definition to PATH: the planet-yield model in Saltelli mode, a "
            "small invented star list, SAG13 occurrence rates with their uncertainty, a Bond "
            "albedo prior, an invented coronagraph and an invented nulling interferometer, "
            "categories and execution settings, every key commented with its meaning and unit. "
            "It runs as written; edit it, then run `sweep plan PATH` and `sweep run PATH`."
        ),
    )
    parser.add_argument("path", metavar="PATH", help="file to write, e.g. workflows/my_study.toml")
    parser.add_argument("--force", action="store_true", help="overwrite PATH if it exists")
    parser.set_defaults(handler=run)


def starter_text(name: str | None = None) -> str:
    """The starter sweep definition, with ``[run] name`` set to ``name`` when given.

    Parameters
    ----------
    name : str, optional
        Name of the sweep ([A-Za-z0-9_.-]+); it also names the default store ``results/<name>.zarr``.
    """
    text = files("sweep").joinpath(STARTER).read_text(encoding="utf-8")
    if name is not None:
        if not _VALID_NAME.fullmatch(name):
            raise ValueError(f"sweep name {name!r} must match [A-Za-z0-9_.-]+")
        text = _NAME_LINE.sub(f'name = "{name}"', text, count=1)
    return text


def write_starter(path, force: bool = False) -> Path:
    """Write the starter sweep definition to ``path``; return the path written.

    The sweep is named after the file's stem when that is a valid sweep name (``study.toml`` ->
    ``"study"``), so starters in one folder get their own stores. Missing parent folders are made.

    Parameters
    ----------
    path : str or Path
        File to write.
    force : bool
        Overwrite an existing file.

    Raises
    ------
    UserInputError
        ``path`` exists (without ``force``) or is a folder.
    """
    path = Path(path).expanduser()
    if path.is_dir():
        raise UserInputError(f"{path}: is a folder; give a file name for the sweep definition, "
                             f"e.g. {path / 'study.toml'}")
    stem = path.stem if path.suffix == ".toml" else path.name
    text = starter_text(stem if _VALID_NAME.fullmatch(stem) else None)
    path.parent.mkdir(parents=True, exist_ok=True)
    try:
        with open(path, "w" if force else "x", encoding="utf-8") as handle:
            handle.write(text)
    except FileExistsError:
        raise UserInputError(f"{path}: already exists; not overwritten (use sweep init --force to "
                             "replace it, or choose another file name)") from None
    return path


def run(args) -> int:
    """Write the starter and say what to run next; return 0."""
    path = write_starter(args.path, force=args.force)
    quoted = shlex.quote(str(path))
    print(f"wrote {path}: a starter sweep definition (invented stars and instruments; edit them)")
    print("next:")
    print(f"  sweep plan {quoted}    # check it; rows, blocks, store size, CPU time")
    print(f"  sweep run {quoted}     # run it")
    return 0
