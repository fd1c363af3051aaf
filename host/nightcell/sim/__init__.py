"""The simulated board: the real firmware on a virtual optical cell behind pseudo-terminals, and its relay.

Used by the demo, ``sim-board`` and the tests; never by the science or the store.
"""
