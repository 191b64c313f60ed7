"""simcheck: check by simulation whether a planned sample size delivers the
confidence interval it promises, and find the n that does.

Results hold only under the assumed data model. Regulated studies follow their
own guidance and a qualified statistician's review; simcheck replaces neither.
"""

__version__ = "0.1.0"

CAUTION = (
    "Simulated results hold only under the assumed data model. Regulated "
    "studies (clinical, safety, regulatory) follow their own guidance and a "
    "qualified statistician's review; simcheck does not replace either."
)
