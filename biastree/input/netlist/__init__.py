"""Reading an existing design: flatten a SPICE netlist, recognise its mirrors, write a plan."""
