"""Numbers as text: to the significant digits they hold, with units.

Rules (the README's "Printed numbers" section states them for users):

* A value whose relative accuracy ``a`` is known (a resistance with its error bound, a reading
  with its instrument band, a solved quantity with the solver's relative tolerance ``rtol``) is
  shown to ``ceil(-log10(a))`` significant digits, between 1 and :data:`MAX_DIGITS`: the last
  digit shown is the first one the accuracy leaves uncertain (common practice in measurement
  reporting: a result is rounded to the decimal place of its uncertainty). Relative accuracy
  1e-9 gives 9 digits; 8 % gives 2.
* A value shown beside its absolute uncertainty ``u`` (a reading beside its instrument band, a
  Monte Carlo range beside its standard deviation) is rounded to the decimal place of the
  second significant digit of ``u``, and ``u`` itself is shown to
  :data:`UNCERTAINTY_DIGITS` digits (the rule of the Guide to the Expression of Uncertainty in
  Measurement, JCGM 100:2008, 7.2.6: uncertainties to at most two significant digits, the
  value to the same decimal place): :func:`digits_beside`.
* A value with no stated accuracy is shown to :data:`DEFAULT_DIGITS` digits.
* CSV files hold at most :data:`CSV_DIGITS` significant digits; with full precision (the
  ``--full-precision`` option) every float is written as Python's ``repr``, the shortest text
  that reads back to the same double. HDF5 files always hold the doubles themselves.

Text uses the ``g`` style (no trailing zeros), ``-0`` is shown as ``0``, and non-finite values
as ``inf``, ``-inf`` and ``nan``.
"""

from __future__ import annotations

import math

DEFAULT_DIGITS = 6
UNCERTAINTY_DIGITS = 2
# A double holds 15 significant decimal digits for certain (DBL_DIG in C's float.h).
MAX_DIGITS = 15
CSV_DIGITS = 12


def digits_for(relative_accuracy, default: int = DEFAULT_DIGITS) -> int:
    """Significant digits a value of the given relative accuracy holds.

    Parameters
    ----------
    relative_accuracy : float or None
        Relative error bound (or relative standard deviation) of the value; None or a
        non-finite number when unknown, 0 for an exact value.
    default : int
        Digits when the accuracy is unknown.

    Returns
    -------
    int
        ``ceil(-log10(relative_accuracy))`` clipped to ``[1, MAX_DIGITS]``; ``MAX_DIGITS`` for
        an exact value.
    """
    if relative_accuracy is None or not math.isfinite(relative_accuracy):
        return default
    accuracy = abs(float(relative_accuracy))
    if accuracy == 0:
        return MAX_DIGITS
    # The small allowance keeps exact powers of ten (1e-9 → 9) from rounding up.
    return min(MAX_DIGITS, max(1, math.ceil(-math.log10(accuracy) - 1e-9)))


def digits_beside(value, uncertainty, default: int = DEFAULT_DIGITS) -> int:
    """Significant digits that round ``value`` to the decimal place of the second significant
    digit of its absolute ``uncertainty`` (clipped to ``[1, MAX_DIGITS]``).

    Parameters
    ----------
    value, uncertainty : float
    default : int
        Digits when either is zero or not finite.
    """
    value, uncertainty = abs(float(value)), abs(float(uncertainty))
    if not (math.isfinite(value) and math.isfinite(uncertainty)) or value == 0 or \
            uncertainty == 0:
        return default
    place = math.floor(math.log10(value)) - math.floor(math.log10(uncertainty))
    return min(MAX_DIGITS, max(1, place + UNCERTAINTY_DIGITS))


def significant(value, digits: int = DEFAULT_DIGITS, sign: bool = False) -> str:
    """``value`` to ``digits`` significant digits (``g`` style, ``-0`` shown as ``0``).

    With ``sign``, positive values (and zero) get a ``+``.
    """
    value = float(value)
    plus = "+" if sign else ""
    if not math.isfinite(value):
        return f"{value:{plus}}"
    return f"{value + 0.0:{plus}.{int(digits)}g}"


def uncertainty(value) -> str:
    """An uncertainty, band or spread to :data:`UNCERTAINTY_DIGITS` digits, trailing zeros kept
    (``0.0020``), so the decimal place the value beside it is rounded to stays visible."""
    value = float(value)
    if not math.isfinite(value):
        return str(value)
    return f"{value + 0.0:#.{UNCERTAINTY_DIGITS}g}".rstrip(".").replace(".e", "e")


def quantity(value, unit: str, digits: int = DEFAULT_DIGITS) -> str:
    """``value`` to ``digits`` significant digits followed by its unit (``"1.6 ohm"``)."""
    return f"{significant(value, digits)} {unit}"


def csv_float_format(full_precision: bool = False) -> str | None:
    """The ``float_format`` for :meth:`pandas.DataFrame.to_csv`.

    ``"%.12g"`` (:data:`CSV_DIGITS`) by default; None with ``full_precision``, which makes
    pandas write ``repr`` of each float (an exact round trip).
    """
    return None if full_precision else f"%.{CSV_DIGITS}g"


__all__ = ["digits_for", "digits_beside", "significant", "uncertainty", "quantity", "csv_float_format", "DEFAULT_DIGITS",
           "UNCERTAINTY_DIGITS", "MAX_DIGITS", "CSV_DIGITS"]
