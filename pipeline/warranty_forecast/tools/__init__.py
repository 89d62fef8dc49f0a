"""Tools beside the nightly path: the seeded demo-data generator and the benchmark."""
