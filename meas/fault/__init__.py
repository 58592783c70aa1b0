"""Validating the network model against a recorded staged fault (COMTRADE in, measured against
predicted out). Only analyses recordings: staging a fault is hazardous work for qualified
persons under the site's procedures."""
