"""Device physics: pure functions over numpy arrays (bipolar and MOS equations, mirror topologies)."""
