"""Where recipes are found: the bundled ones (the ``aligner_recipes`` package) and local ones
(``*.toml`` in the user's recipe folder, or a folder given)."""

from __future__ import annotations

import difflib
from dataclasses import dataclass
from pathlib import Path

from ..errors import RecipeError
from .format import Recipe, load_recipe

__all__ = ["Entry", "bundled_dir", "bundled_recipes", "catalog", "find_recipe", "local_dir"]


def bundled_dir() -> Path:
    """The folder of bundled recipes (the top-level ``recipes`` package)."""
    import aligner_recipes

    return Path(aligner_recipes.__file__).parent


def local_dir() -> Path:
    """The user's own recipes: ``recipes`` in the user data folder (platformdirs), e.g.
    ``~/.local/share/aligner/recipes``."""
    import platformdirs

    return Path(platformdirs.user_data_dir("aligner", appauthor=False)) / "recipes"


def bundled_recipes() -> list[Recipe]:
    """Every bundled recipe, sorted by file name."""
    return [load_recipe(p) for p in sorted(bundled_dir().glob("*.toml"))]


@dataclass(frozen=True)
class Entry:
    """A recipe file found: where it came from (``bundled`` or ``local``), its path, and the
    recipe, or the error that keeps it from loading."""

    origin: str
    path: Path
    recipe: Recipe | None
    error: str = ""

    @property
    def name(self) -> str:
        """The file stem."""
        return self.path.stem

    def to_json(self) -> dict[str, object]:
        """The entry as plain data (``aligner recipe list --json``; the step count is
        ``steps_total``, as a recipe run's)."""
        r = self.recipe
        return {
            "name": self.name,
            "origin": self.origin,
            "path": str(self.path),
            "title": r.title if r else None,
            "steps_total": len(r.steps) if r else None,
            "duration_min": r.duration_min if r else None,
            "error": self.error,
        }


def _entries(origin: str, folder: Path) -> list[Entry]:
    out = []
    for path in sorted(folder.glob("*.toml")) if folder.is_dir() else ():
        try:
            out.append(Entry(origin, path, load_recipe(path)))
        except RecipeError as exc:
            out.append(Entry(origin, path, None, str(exc)))
    return out


def catalog(folders: tuple[Path, ...] | None = None) -> list[Entry]:
    """The bundled recipes, then the local ones (``folders``, default :func:`local_dir`); a
    local file that does not load is listed with its error."""
    local = (local_dir(),) if folders is None else folders
    return [*_entries("bundled", bundled_dir()), *(e for f in local for e in _entries("local", f))]


def find_recipe(name_or_path: str) -> Recipe:
    """A recipe by file path, or by the name of a bundled or local recipe."""
    p = Path(name_or_path)
    if p.suffix == ".toml" or p.exists():
        return load_recipe(p)
    for folder in (bundled_dir(), local_dir()):
        candidate = folder / f"{name_or_path}.toml"
        if candidate.exists():
            return load_recipe(candidate)
    names = [q.stem for f in (bundled_dir(), local_dir()) if f.is_dir() for q in f.glob("*.toml")]
    close = difflib.get_close_matches(name_or_path, names, n=1)
    hint = f"; did you mean {close[0]!r}?" if close else ""
    raise RecipeError(
        f"no recipe file or bundled or local recipe named {name_or_path!r} (known: "
        f"{', '.join(sorted(names))}){hint}"
    )
