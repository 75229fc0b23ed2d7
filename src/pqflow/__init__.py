"""pqflow: real-world and market-consistent economic scenarios with exact density weights.

The library is pure computation plus one storage layer; the Prefect flows that run it live in
the separate ``pipeline`` package.
"""

from __future__ import annotations

__all__ = ["__version__", "CAUTION"]

__version__ = "0.1.0"

CAUTION = (
    "pqflow supports actuarial work; it does not certify it. Regulatory and actuarial "
    "sign-off of any scenario set, valuation or report rests with qualified professionals "
    "under the rules that apply locally."
)
