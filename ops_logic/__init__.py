"""Pure engineering core of fishway-ops: site model, hydraulics, water quality, solver,
recommender, QC and alarm rules. No database, no web request, no clock: time is an argument."""
