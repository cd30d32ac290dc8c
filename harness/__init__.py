"""The top of pfcrig: the closed loop (``closedloop``), campaigns (``campaigns``), targets
and the lockstep link (``targets``) and the command line (``cli``)."""
