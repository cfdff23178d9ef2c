"""Pure computation: profiles, circuits, solver, faults, diagnosis, safety, history store.

Nothing in this package imports textual or serial, and nothing here prints.
"""
