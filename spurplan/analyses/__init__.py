"""The analyses wing: questions asked of a lineup.

The compliance check, drive and tuning sweeps, the filter remedy, yield, the cascade
budget, a mixer's spur chart, a filter's view and the band listing; each returns a
result object with its rows and verdict.  Depends on the model, input and engine wings.
"""
