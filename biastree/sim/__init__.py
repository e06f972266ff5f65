"""The circuit simulator: running ngspice and comparing its answers."""
