"""Reading a sweep: queries over the store as typed results, the one view layer that
shows them, and the figures and report built from them."""
