"""Sites, stations, tanks and devices: the hatchery's layout."""
