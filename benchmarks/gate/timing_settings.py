"""How long and how often the gate's timing half measures: plain numbers with no imports, so that
the command line can show them in its help without loading numba (the parser is built for every
command, `topdrift --version` included)."""

# Many short rounds rather than a few long ones: on this 2-core machine under the load of other
# work, 41 rounds of 10 ms passes gave 95 % intervals of +-1 to 3 % where 9 rounds of 50 ms (the
# same total time) gave +-6 to 19 % (measured side by side): the noise comes in bursts, and a
# rank interval shrugs off a burst that lands on a few short passes.
TIMING_TARGET_S = 0.01
TIMING_ROUNDS = 41
