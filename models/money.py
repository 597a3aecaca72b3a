"""How a message writes an amount of money.

The library knows no currency, so its messages write prices and costs with a
:data:`MoneyText` function that the caller may pass: the service passes one that rounds
to the currency's minor unit and adds its code (``17.93 EUR``, ``1,800 JPY``). Without
one, :func:`plain_money` writes up to six significant digits.
"""

from __future__ import annotations

from collections.abc import Callable

MoneyText = Callable[[float], str]


def plain_money(value: float) -> str:
    """An amount without a currency: up to six significant digits.

    >>> plain_money(17.930000000000003), plain_money(1250.0)
    ('17.93', '1250')
    """
    return f"{value:.6g}"
