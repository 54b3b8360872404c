"""Test-only helpers that stand in for the outside world (a model server on real sockets).

Nothing in the package imports this; tests and bench scripts put ``tests/`` on
``sys.path`` (pytest does so itself) and import ``support.plan_server``.
"""
