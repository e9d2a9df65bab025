"""certimatch: least-cost allocation of work to capacity, with a proof of optimality."""

__version__ = "0.1.0"
