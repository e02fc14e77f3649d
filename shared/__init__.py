"""The layer under plan, audit and readout: readers, keys and exact sums, engines, words, report kit, history, maths."""
