"""The portfolio's currency: ``currency EUR`` at the top level, an ISO 4217 code.

The code names the currency of every price in the file and of every money
figure a dispatch writes (docs/language.md, docs/outputs.md).  Without the
line, money has no declared currency and is shown as ``money``.

The codes accepted are the circulating currencies of ISO 4217 "List one"
(published by the ISO 4217 maintenance agency, SIX Financial Information),
without its fund codes, precious metals, testing and "no currency" codes:
money an energy market settles in.
"""

from __future__ import annotations

from typing import Optional

from ..diagnostics import DuplicateSetting, UnknownCurrency
from .names import suggest

CODES = frozenset("""
AED AFN ALL AMD ANG AOA ARS AUD AWG AZN BAM BBD BDT BGN BHD BIF BMD BND BOB BRL BSD BTN BWP BYN
BZD CAD CDF CHF CLP CNY COP CRC CUP CVE CZK DJF DKK DOP DZD EGP ERN ETB EUR FJD FKP GBP GEL GHS
GIP GMD GNF GTQ GYD HKD HNL HTG HUF IDR ILS INR IQD IRR ISK JMD JOD JPY KES KGS KHR KMF KPW KRW
KWD KYD KZT LAK LBP LKR LRD LSL LYD MAD MDL MGA MKD MMK MNT MOP MRU MUR MVR MWK MXN MYR MZN NAD
NGN NIO NOK NPR NZD OMR PAB PEN PGK PHP PKR PLN PYG QAR RON RSD RUB RWF SAR SBD SCR SDG SEK SGD
SHP SLE SOS SRD SSP STN SVC SYP SZL THB TJS TMT TND TOP TRY TTD TWD TZS UAH UGX USD UYU UZS VED
VES VND VUV WST XAF XCD XCG XOF XPF YER ZAR ZMW ZWG
""".split())


def check_currency(stmts, sink) -> Optional[str]:
    """The declared code (None when there is no ``currency`` line); P317 for a code not listed,
    P203 for a second declaration."""
    found = first = None
    for st in stmts:
        if st.key != "currency_decl":
            continue
        if first is not None:
            sink.add(DuplicateSetting, st.span, "the currency is declared twice",
                     f"note: first declared at {first.span}")
            continue
        first = st
        code = st.name.text
        if code in CODES:
            found = code
        elif code.upper() in CODES:
            sink.add(UnknownCurrency, st.name.span, f"currency '{code}': ISO 4217 codes are written in "
                     f"capitals; did you mean '{code.upper()}'?")
        else:
            sink.add(UnknownCurrency, st.name.span, f"'{code}' is not an ISO 4217 currency code"
                     f"{suggest(code.upper(), sorted(CODES))}",
                     "note: three capital letters, e.g. 'currency EUR' or 'currency USD'")
    return found
