"""A session's dataset folder: ``schema`` of its tables, ``export`` from a journal, ``read`` it
back (checked), ``collection`` of several sessions; the offline re-check is ``meas.recheck``."""
