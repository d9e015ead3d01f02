"""Trial conduct in calendar time: accrual, time to outcome, dropout and what each look sees.

:mod:`octrial.conduct.model` holds the values read from a design's ``[conduct]`` table.
"""
