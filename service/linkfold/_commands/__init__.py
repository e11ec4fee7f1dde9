"""The CLI's commands, one module per area; each is a thin wrapper around one library function.

Shared pieces (the context object, option decorators, JSON-lines output) live in :mod:`._common`.
"""
