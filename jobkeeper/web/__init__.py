"""Showing a keep to people: figures for print (:mod:`~jobkeeper.web.figures`, drawn from
records found by :mod:`~jobkeeper.web.records`), the read-only web view
(:mod:`~jobkeeper.web.views` what each page shows, :mod:`~jobkeeper.web.app` the app and
its guard, :mod:`~jobkeeper.web.server` serving it) and the referee's report on a bundle
(:mod:`~jobkeeper.web.report`).

A reader of the keep through :class:`~jobkeeper.keeper.Keeper`, like the command line:
nothing in the core imports it.
"""
