"""The C spellings of each arithmetic precision: one record per precision, read by the
C emitter (type, literal suffix, math function names); the plan supplies the guards."""

from __future__ import annotations

import struct
from dataclasses import dataclass

from ..errors import ScorewrightError


@dataclass(frozen=True)
class CPrecision:
    name: str     # the plan precision it lowers
    real: str     # C type of every intermediate
    suffix: str   # literal suffix
    exp: str
    fabs: str
    # A batch row's double as this precision: a finite double beyond float range
    # saturates (narrowed it would be an infinity, read as missing), so a batch row is
    # clamped as the row scorer's saturating driver does; quiet tests, no FP flag on NaN.
    batch_read: str = "{src}"

    def rounded(self, x: float) -> float:
        """`x` rounded to nearest in this precision."""
        x = float(x)
        if self.real == "float":
            try:
                x = struct.unpack("<f", struct.pack("<f", x))[0]
            except OverflowError:
                raise ScorewrightError(
                    f"constant {x!r} of the model does not fit in a C float") from None
        return x

    def clamped(self, fill: float, bound: float) -> float:
        """min(max(fill, -bound), bound) in this precision: a selection, no rounding, so
        the emitter may apply the plan's clamp to a constant fill ahead of time."""
        b = self.rounded(bound)
        return min(max(self.rounded(fill), -b), b)

    def literal(self, x: float) -> str:
        """The exact C literal of `x` rounded to this precision."""
        return float.hex(self.rounded(x)) + self.suffix


PRECISIONS = {
    "double": CPrecision("double", "double", "", "exp", "fabs"),
    "float": CPrecision("float", "float", "f", "expf", "fabsf",
                        "(float)(!isfinite({src}) ? {src} : isgreater({src}, 0x1.fffffep+127) ? "
                        "0x1.fffffep+127 : isless({src}, -0x1.fffffep+127) ? -0x1.fffffep+127 "
                        ": {src})"),
}
