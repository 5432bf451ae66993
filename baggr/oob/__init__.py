"""Out-of-bag figures: tallies folded in member order (tally), the OOB view of a run (view) and
the intervals they print (intervals)."""
