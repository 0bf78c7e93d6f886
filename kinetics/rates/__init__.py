"""Rate laws, written mechanisms, fits with intervals, model comparison and forecasts."""
