//! The simulated rig: a behavioural earphone model and a seeded population.
