"""The invented demo region: `scenarios` (the region and its later counts), `agreedzones`
(its lock file), `synthetic` (tessellations for tests and benchmarks) and `run`
(`zonedesign demo`)."""
