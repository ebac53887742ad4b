"""Each matched set simulated in its application's reference circuit (ngspice)."""
