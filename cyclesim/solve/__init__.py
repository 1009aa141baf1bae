"""The cycle solver: batches, the gas tables, the Runge-Kutta stepper, the cycle system and periodic driver, the choice of loop, and the step self-check."""
