"""Write the conformance vectors in shared/conformance/ (run from the repository root):

    python tests/make_conformance.py NAME...

for the named test models only (a new model's vectors; the committed ones stay as they
are: every target is held to them unchanged), or with --all for every model.

For each test model of tests/models.py it writes the frozen model
(<name>.model.json) and its vectors (<name>.vectors.json): edge-case and random
inputs with the reference evaluator's outputs. The files are committed; the
conformance suite (tests/test_conformance.py) holds every target to them.
"""

from __future__ import annotations

import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

import models  # noqa: E402

from scorewright.verify.vectors import make_vectors, write_json  # noqa: E402

OUT = HERE.parent / "shared" / "conformance"


def main(argv: list[str]) -> int:
    names = list(models.BUILDERS) if argv == ["--all"] else argv
    unknown = [n for n in names if n not in models.BUILDERS]
    if not names or unknown:
        print(f"usage: make_conformance.py NAME... | --all (models: "
              f"{', '.join(models.BUILDERS)})", file=sys.stderr)
        return 2
    OUT.mkdir(parents=True, exist_ok=True)
    for name in names:
        model = models.build(name).model
        (OUT / f"{name}.model.json").write_text(model.to_json(), encoding="ascii")
        write_json(OUT / f"{name}.vectors.json", make_vectors(model))
        print(f"wrote {name}: {OUT / (name + '.vectors.json')}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
