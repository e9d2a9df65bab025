"""Engines: each takes a :class:`~service.network.model.Network` and returns flows on its arcs.

One module per engine, one entry point ``solve``; engines know nothing of HTTP, of the
certificate or of each other. The dispatcher (:mod:`service.solve.dispatch`) picks one by shape.
"""
