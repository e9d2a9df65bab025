"""The HTTP edge: views, body reading, authentication, request ids, logs and metrics, pages.

Only this room (and :mod:`service.app`, which wires it) imports Flask.
"""
