"""Demo vehicle simulator: dynamic single-track model, tyres, driver and scenarios."""
