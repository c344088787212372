"""Target profiles: declarative TOML files naming an emitter, its options, how verify runs
the artifact, and the target's stated tolerance. A user adds a target by writing one."""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, field
from pathlib import Path

from ..emit.templating import templates_dir
from ..errors import ScorewrightError
from .compare import Tolerance

PROFILE_KEYS = ("name", "description", "emitter", "emit", "verify", "tolerance", "requires",
                "tags")


@dataclass(frozen=True)
class Profile:
    name: str
    description: str
    emitter: str
    emit: dict
    verify: dict
    tolerance: Tolerance
    requires: dict = field(default_factory=dict)  # {"commands": [...], "modules": [...]}
    path: Path | None = None
    # Labels that choose which checks the test suite gives the profile (family,
    # emitter_key, needs_server, cost; DEVELOPERS.md); scoring never reads them.
    tags: dict = field(default_factory=dict)

    @property
    def runner(self) -> str:
        return self.verify.get("runner", self.emitter)

    @property
    def run_options(self) -> dict:
        opts = dict(self.emit)
        opts.update({k: v for k, v in self.verify.items() if k != "runner"})
        return opts

    def missing_requirements(self) -> list[str]:
        """What this machine lacks to run the profile (empty: it can run)."""
        from .requirements import missing

        return missing(self.requires)

    def install_command(self, lacks: list[str]) -> str:
        """The shell line that installs what this profile lacks."""
        from .requirements import install_command

        return install_command(self.requires, lacks)


def profiles_dir() -> Path:
    """targets/ inside the installed package, or at the top of a source checkout."""
    return templates_dir().parent / "targets"


def builtin_names() -> list[str]:
    return sorted(p.stem for p in profiles_dir().glob("*.toml"))


def load_profile(name_or_path: str) -> Profile:
    path = Path(name_or_path)
    if not (path.suffix == ".toml" and path.is_file()):
        path = profiles_dir() / f"{name_or_path}.toml"
        if not path.is_file():
            raise ScorewrightError(f"unknown target {name_or_path!r}; built-in targets: "
                                   f"{', '.join(builtin_names())} (or give a .toml file)")
    try:
        table = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise ScorewrightError(f"{path}: not valid TOML ({exc})") from None
    unknown = [k for k in table if k not in PROFILE_KEYS]
    if unknown:
        raise ScorewrightError(f"{path}: unknown key {unknown[0]!r}")
    for key in ("name", "emitter"):
        if not isinstance(table.get(key), str) or not table[key]:
            raise ScorewrightError(f"{path}: {key!r} must be a non-empty string")
    for key in ("emit", "verify", "tolerance", "requires", "tags"):
        if not isinstance(table.get(key, {}), dict):
            raise ScorewrightError(f"{path}: [{key}] must be a table")
    for tag, value in table.get("tags", {}).items():
        if not isinstance(value, (str, bool, int)):
            raise ScorewrightError(f"{path}: [tags] {tag!r} must be a string, boolean or integer")
    try:
        tolerance = Tolerance.from_table(table.get("tolerance", {}))
    except TypeError as exc:
        raise ScorewrightError(f"{path}: [tolerance]: {exc}") from None
    except ScorewrightError as exc:
        raise ScorewrightError(f"{path}: {exc}") from None
    return Profile(table["name"], table.get("description", ""), table["emitter"],
                   table.get("emit", {}), table.get("verify", {}), tolerance,
                   table.get("requires", {}), path, table.get("tags", {}))
