"""Service functions behind the Vault: each takes a session and never commits.

The caller (a :class:`magvault.Vault` method) owns the unit of work.
"""
