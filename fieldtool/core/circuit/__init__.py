"""What the board is and how it behaves: profiles, topologies, netlists and the solver."""
