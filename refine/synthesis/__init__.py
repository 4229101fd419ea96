"""From the spec to a first design: lowpass prototypes, the closed-form inverter design, its
realisation as copper, and the feasibility diagnosis of the couplings the fab rules allow."""
