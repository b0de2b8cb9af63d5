"""Writing a sweep: the spec, its size and data, the grid, the plan, the engine and
where its tasks run, and the explain step."""
