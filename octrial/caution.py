"""The caution every report, run record and help text carries."""

CAUTION = (
    "These operating characteristics support, and do not replace, the judgement of "
    "qualified statisticians and agreement with the regulatory agency; local regulations "
    "and guidance govern. Every number depends on the design file's assumptions (priors, "
    "true values, sample sizes and decision rules) as stated."
)
