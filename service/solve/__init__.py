"""The solving core: from the normalised network to a certified answer.

:mod:`~service.solve.dispatch` picks an engine by shape and runs the two stages
(:mod:`~service.solve.feasibility`, :mod:`~service.solve.engines`);
:mod:`~service.solve.certificate` proves the flow optimal on the
:mod:`~service.solve.extended` network; :mod:`~service.solve.answer` writes the answer;
:mod:`~service.solve.pipeline` runs all of it and has the independent checker
(:mod:`service.check`) accept the answer before it may leave. Nothing here knows HTTP.
"""
