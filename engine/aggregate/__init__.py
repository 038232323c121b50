"""Every estimator from per-(stratum, distinct time) sufficient statistics.

The tables here are computed where the data live (numpy for a frame in memory, SQL for DuckDB
and PostgreSQL) and hold no rows: counts of exits (events and censorings) and of entries per
group, stratum and time, and for the Cox model the per-time sums of w, w·x and w·x·xᵀ at given
coefficients. The row-level estimators of ``engine.survival.curves``, ``engine.survival.compare``
and
``engine.cox.fit`` then run on them unchanged.
"""
