"""C literals of the constants in ``design.constants``, per number format."""

from __future__ import annotations

from design.constants import Const


def c_literal(k: Const, number_format: str = "float32") -> str:
    """``12u`` for an unsigned constant; ``((int32_t)N)`` with ``N = round(value / base x
    2^bits)`` for a real in a q15 build; ``(1.5f)`` for a real in a float build (and for
    per-unit bases in every build)."""
    if k.kind == "u":
        return f"{int(k.value)}u"
    if number_format == "q15" and k.kind == "f":
        n = int(round(k.value / k.q_base * 2.0**k.q_bits))
        if not -(2**31) <= n < 2**31:
            raise ValueError(
                f"{k.name} = {k.value:g} does not fit int32 as Q{k.q_bits} of {k.q_base:g}"
            )
        return f"((int32_t){n})"
    text = f"{float(k.value):.9g}"
    if "e" not in text and "." not in text and "inf" not in text and "nan" not in text:
        text += ".0"
    return f"({text}f)"
