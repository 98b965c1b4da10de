"""Pure analyses: numpy arrays and parameters in, frozen dataclasses out.

Nothing in this package knows about the database.  One module per measurement
kind; :mod:`magvault.analysis.results` holds the shapes every analysis returns.
"""
