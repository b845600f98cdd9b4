"""How long and how often the gate's timing half measures: plain numbers with no imports, so that
the command line can show them in its help without loading numba (the parser is built for every
command, `topdrift --version` included)."""

# Many short rounds rather than a few long ones: on this 2-core machine under the load of other
# work, 41 rounds of 10 ms passes gave 95 % intervals of +-1 to 3 % where 9 rounds of 50 ms (the
# same total time) gave +-6 to 19 % (measured side by side): the noise comes in bursts, and a
# rank interval shrugs off a burst that lands on a few short passes.
TIMING_TARGET_S = 0.01
TIMING_ROUNDS = 41

# Waiting out a machine state (`topdrift gate --wait-out N`): when the reference workload's two
# kernels have moved more than WAIT_DRIFT against each other since the baseline, the gate pauses
# WAIT_PAUSE_S and times everything again, up to N times, and keeps the measurement whose
# witness is nearest the baseline's. Measured (docs/timing.md, an hour of gates on an AMD EPYC
# family 25 model 17): clean runs had the witness within 1.6 % and every verdict right; the runs
# with misses had it moved 3.4 to 4.8 %, in states that came and went within minutes.
WAIT_DRIFT = 0.02
WAIT_PAUSE_S = 60.0
