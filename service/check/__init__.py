"""The independent checker: is this answer an optimal solution of this problem?

It reads the problem (:mod:`service.network`) and the answer only, and imports nothing from
the solving core (:mod:`service.solve`): it checks the definitions rather than repeating
the computation that produced the answer.
"""
