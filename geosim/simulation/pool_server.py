"""What the local pool's server process imports first (:func:`geosim.simulation.runner.pool_context`).

Importing it sets numba's compiler up (:func:`geosim.simulation.runner.set_up_numba`) in that
process, so the workers and writers forked from it load their first kernel without doing so
each (about 0.3 s of CPU apiece, measured).  Nothing else imports it.
"""
from .runner import set_up_numba

set_up_numba()
