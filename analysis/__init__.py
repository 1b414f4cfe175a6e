"""Analysis side of bandcensus: reads the survey database and draws conclusions.

Never talks to hardware; reads the database only through :mod:`survey.store`'s typed read
helpers, through one :class:`analysis.selection.Survey` per database. Subpackages per concern
(``compare``, ``noise``, ``passband``, ``diagnose``, ``report``); :mod:`analysis.workflows`
composes them, each computed once.
"""
