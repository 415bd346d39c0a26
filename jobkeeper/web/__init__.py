"""Showing a keep to people: figures for print (:mod:`jobkeeper.web.figures`), read from
a keep through :class:`~jobkeeper.keeper.Keeper` (:mod:`jobkeeper.web.records`).

A reader of the keep, like the command line: nothing in the core imports it.
"""
