"""What is simulated: state, potentials, tables and chain builders."""
