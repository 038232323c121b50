"""Hazel's computational core: import, column roles, data checks, estimators, tests and models.

Nothing in this package draws, prints or imports a user-interface library; every result is a
frozen dataclass with ``to_frame()`` / ``to_dict()`` that the app, the command line and the
report all render.
"""
