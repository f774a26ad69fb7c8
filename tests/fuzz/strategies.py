"""Generated inputs for the fuzz suite: values that must be refused anywhere a number is read, and
values that may or may not be good (the oracle then checks what came back)."""

from __future__ import annotations

from hypothesis import strategies as st

# Issue 9's examples, and their relatives: each is refused wherever a number is read.
KNOWN_BAD = ["1e300", "-1e300", "9" * 400, "nan", "inf", "-inf", "NaN", "infinity", "2**10",
             "9**9**9", "10**10**7", "[72]", "72%", "72 °", "--72", "72;", "１２", "٧٢", "७२", "72²",
             "1_000", "0x1F", "abc", "1/0", "(72)", "72e", "e5", ".", "-", "+", "72,5", "1,004",
             "2,500", "1e999", "-1e999", "72 72", "7 2", "\x00", "72\x00", "{72}", "72!", "$72",
             "1e-400x", "′72", "72 psi psi", "72..5", "7.2.5", "++72", "+-72", "0b101", "1j",
             "72/0", "sqrt(72)", "__import__('os')", "72 #"]
UNITS = ["", " ", "psi", " psi", "kPa", " kPa", "bar", "gpm", " gpm", "L/s", " L/s", "in", " in",
         "mm", "ft", " ft", "m", " m", "%", "°", "**2", " m**3/s", "degF", "psi**9**9", "ft H2O",
         "µm", "ｐｓｉ", " psi;", "inch", "furlong", "dimensionless"]

must_refuse = st.one_of(
    st.sampled_from(KNOWN_BAD),
    # numbers far outside every plausible range, in any spelling
    st.builds(lambda m, e, s: f"{s}{m}e{e}", st.integers(1, 9), st.integers(10, 400),
              st.sampled_from(["", "-", "+"])),
    # text with at least one letter-free junk mark that is never part of a number
    st.builds(lambda a, mark, b: f"{a}{mark}{b}", st.text("0123456789.", max_size=5),
              st.sampled_from(list(",;%[](){}*^!#$&|<>=?'\"\\`~") + ["°", "²", "１", "٣"]),
              st.text("0123456789.", max_size=5)),
)

maybe = st.one_of(
    must_refuse,
    st.builds(lambda n, u: f"{n}{u}", st.floats(allow_nan=True, allow_infinity=True),
              st.sampled_from(UNITS)),
    st.builds(lambda n, u: f"{n}{u}", st.integers(-10**6, 10**6), st.sampled_from(UNITS)),
    st.text(max_size=25),
    st.text(alphabet="0123456789.,-+eE ", max_size=14),
)
