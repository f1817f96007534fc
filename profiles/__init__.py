"""The example profiles, installed as the data package `tuikiln.profiles` (see pyproject.toml).

This file only makes the folder a package, so `importlib.resources` finds the profiles the
same way in a wheel, a plain install and an editable one.
"""
