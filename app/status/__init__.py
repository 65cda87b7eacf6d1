"""Daily status of a site: per-station day figures, per-tank predictions, fill-window hint."""
