"""Hardware layer: capability protocols, the voltage-ceiling guard, the back-end registry
and the back-ends themselves (simulated burner, DAQ cards, SCPI generators, sound cards).

Must not import Qt, the engine, storage or the measurement estimators. Each back-end
imports its own hardware library lazily so a missing library never breaks start-up.
"""
