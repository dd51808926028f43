"""Building blocks shared by every agent: networks, schedules, replay, optimisers, RNG."""
