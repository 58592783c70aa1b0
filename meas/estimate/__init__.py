"""Model-aware verification of readings: a three-phase weighted-least-squares estimator over the
network model with meter gains and model parameters as unknowns, its bad-data tests and the
coverage it gives each meter."""
