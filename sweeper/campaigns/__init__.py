"""Many runs of one plan: campaigns (repeats, drift), the production line (board after board),
and a board's copy of a plan."""
