"""Pattern drift: which co-purchase patterns emerge or fade between windows (no I/O)."""
