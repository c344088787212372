"""The normal tail Q(a) = Phi(-a) = erfc(a / sqrt 2) / 2 for a >= 0, as data the probit
link's lowering (`program._lower_probit`) writes out in primitives.

SQL engines, ONNX and C99 on small boards have no erfc, and the ones that do differ,
so the probit link computes the tail from + - * / and exp alone, in one fixed order,
and every target computes the same operations (exactly the same bits where its exp
is the reference's, as with the portable exp). Method (a textbook one; the
coefficients are fitted by this project with mpmath, see `fit_coefficients`):

  z = a / sqrt 2 (a times the double nearest 1/sqrt 2), t = 2 / (2 + z) and
  y = (2 - z) / (2 + z), so y runs over (-1, 1] as z runs over [0, inf);
  erfc(z) = t * exp(-z^2 + f(y)), where f(y) = ln(erfc(z) / t) + z^2 is smooth on
  [-1, 1] (f(1) = 0, f(-1) = -ln(2 sqrt pi)) and is summed as a Chebyshev series of
  31 terms (Clenshaw's recurrence; the first neglected coefficients are below 1e-19).
  z^2 = a^2 / 2 is not rounded: a is split as ah + (a - ah), with ah = (a + s) - s
  (s = 1.5 * 2^36: ah is a rounded to a multiple of 2^-16, so ah * ah is exact for
  a <= 37.5), and exp(-z^2 + f) = exp(-ah^2 / 2) * exp(f - (a - ah)(a + ah) / 2).

Measured against mpmath at 200 bits (tests/test_links.py): relative error at most
about 3 ULP over [0, 37.5] with the C library's exp. Beyond a = 37.5 (the tail is
4.6e-308 there, the last normal doubles) the margin is clamped, as every exp
argument is.
"""

from __future__ import annotations

# The Chebyshev coefficients c_0 (already halved) .. c_30 of f(y), as exact hex text.
COEFFICIENTS = (
    "-0x1.4d7ab6d479a61p-1", "0x1.48b043be61cf8p-1", "0x1.3f1a3fdd047b2p-6",
    "-0x1.394fcca79fc6cp-7", "-0x1.f049e06073f95p-11", "0x1.80a8ba56aa79fp-12",
    "0x1.64b62509d78e2p-15", "-0x1.5437d46df3674p-16", "-0x1.b4045bf3ab82ep-20",
    "0x1.5df28bff56fe4p-20", "0x1.0c75d14776c3ep-26", "-0x1.6e18471000f52p-24",
    "0x1.c0ac572395fb0p-28", "0x1.5bace97b36ccfp-28", "-0x1.10810cfbab426p-30",
    "-0x1.f3fb2f5c75c6cp-33", "0x1.a8453647a8215p-34", "0x1.50ee4fe907594p-39",
    "-0x1.e48fa4ddcffcfp-38", "0x1.f78d4bbe8305dp-41", "0x1.6082aa4eb3ddfp-42",
    "-0x1.fb97bc18977ccp-44", "0x1.b75e11fe90ba6p-52", "0x1.00062e98e5a55p-47",
    "-0x1.b6fba552f88ccp-50", "-0x1.b4266370b4162p-54", "0x1.170fcb52ea588p-53",
    "-0x1.03ca93a8dfd09p-55", "0x1.d885407e7890bp-65", "0x1.57914ac919f61p-59",
    "-0x1.f291846e795bep-61",
)
INV_SQRT2 = "0x1.6a09e667f3bcdp-1"  # the double nearest 1/sqrt 2


def coefficients() -> tuple[float, ...]:
    return tuple(float.fromhex(c) for c in COEFFICIENTS)


def fit_coefficients(prec_bits: int = 200, nodes: int = 64) -> list[str]:
    """COEFFICIENTS re-derived with mpmath: f sampled at `nodes` Chebyshev nodes of the
    first kind, the discrete cosine transform giving c_k, c_0 halved, 31 kept."""
    import mpmath as mp

    with mp.workprec(prec_bits):
        def f(y):
            if y == -1:
                return -mp.log(2 * mp.sqrt(mp.pi))
            z = 2 * (1 - y) / (1 + y)
            return mp.log(mp.erfc(z) / ((1 + y) / 2)) + z * z

        half = mp.mpf(1) / 2
        values = [f(mp.cos(mp.pi * (j + half) / nodes)) for j in range(nodes)]
        out = []
        for k in range(len(COEFFICIENTS)):
            c = 2 * mp.fsum(v * mp.cos(mp.pi * k * (j + half) / nodes)
                            for j, v in enumerate(values)) / nodes
            out.append(float.hex(float(c / 2 if k == 0 else c)))
        return out
