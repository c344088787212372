"""Single-row latency: the emitted Python scorer vs scikit-learn's Pipeline.predict_proba.

    python bench/bench_python.py

Both run in this process on the same row of the invented compressor data; the
figure is the median over repeats of the per-call time. Goal: the emitted
scorer at least 50x faster per single row.
"""

from __future__ import annotations

import importlib.util
import statistics
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))

import models  # noqa: E402

from scorewright.emit import emitter  # noqa: E402


def per_call(fn, calls: int, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        for _ in range(calls):
            fn()
        times.append((time.perf_counter() - t0) / calls)
    return statistics.median(times)


def main() -> None:
    tm = models.build("fault_binary")
    (art,) = emitter("python")(tm.model, {})
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / art.name
        path.write_bytes(art.content)
        spec = importlib.util.spec_from_file_location("bench_scorer", path)
        scorer = importlib.util.module_from_spec(spec)
        spec.loader.exec_module(scorer)
    frame_row = tm.frame.iloc[[0]]
    row = frame_row.iloc[0].to_dict()
    sk = per_call(lambda: tm.estimator.predict_proba(frame_row), 200, 9)
    ours = per_call(lambda: scorer.predict_proba(row), 20000, 9)
    print(f"scikit-learn Pipeline.predict_proba, one row: {sk * 1e6:10.1f} us (median)")
    print(f"emitted Python scorer, one row:              {ours * 1e6:10.1f} us (median)")
    print(f"ratio (scikit-learn / emitted): {sk / ours:.0f}x  (goal: >= 50x)")


if __name__ == "__main__":
    main()
