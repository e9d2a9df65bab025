"""The normalised problem: :mod:`~service.network.model` (what it is) and
:mod:`~service.network.build` (how a loaded request becomes one)."""
