"""Analysis side of bandcensus: reads the survey database and draws conclusions.

Never talks to hardware; reads the database only through :mod:`survey.store`'s read helpers.
"""
