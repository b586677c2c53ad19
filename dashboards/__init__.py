"""beamaudit stage package."""
