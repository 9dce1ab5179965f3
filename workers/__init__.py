"""tutti's execution side: search shards and finalize tasks run by RQ worker processes.

Kept light on purpose: classes from ``workers.ensembling`` end up in exported pipelines, which
must load with only tutti, scikit-learn and LightGBM installed.
"""
