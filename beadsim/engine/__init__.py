"""How the state moves: integrators, minimiser, the run loop."""
