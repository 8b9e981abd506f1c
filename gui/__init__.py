"""Desktop application for the 2D ray tracer: draw parts, watch ray fans and losses live."""
