"""Regenerate the conformance vectors in shared/conformance/ (run from the repository root):

    python tests/make_conformance.py

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


def main() -> None:
    OUT.mkdir(parents=True, exist_ok=True)
    for name in models.BUILDERS:
        model = models.build(name).model
        (OUT / f"{name}.model.json").write_text(model.to_json(), encoding="ascii")
        write_json(OUT / f"{name}.vectors.json", make_vectors(model))
        print(f"wrote {name}: {OUT / (name + '.vectors.json')}")


if __name__ == "__main__":
    main()
