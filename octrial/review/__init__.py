"""Reviewer re-computation of claimed operating characteristics.

A reviewer gives a design and a claims file (one claimed number per row); octrial
recomputes each number and judges it with a two-sided test that accounts for the Monte
Carlo error on both sides and for the claim's rounding, adjusting over all claims by Holm's
procedure::

    from octrial.review import read_claims, verify
    claims = read_claims("designs/single-arm-response.claims.csv", design)
    result = verify(design, claims)       # result.table is verify.csv
"""

from octrial.review.claims import Claim, Claims, read_claims
from octrial.review.verification import Verification, verify

__all__ = ["Claim", "Claims", "Verification", "read_claims", "verify"]
