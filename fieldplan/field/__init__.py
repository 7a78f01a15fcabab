"""When the field disagrees with the plan: spares, substitutes, events, actual positions, certainty units."""
