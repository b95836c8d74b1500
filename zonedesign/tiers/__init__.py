"""Tiers bottom-up, fence by fence: the one runner and its two per-fence strategies.

units: the units of a tier and the problem of one fence; tasks: a fence's task, result
and seed; executors: where tasks run; runner: the tier loop (`run_tiers`); design and
redraw: the strategies; naming: zone ids of a design and the code policy of a redraw.
"""
