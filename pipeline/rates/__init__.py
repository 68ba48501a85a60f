"""Production rates: Q-unit stacking, limit statistics, the limits table, line fits, activity laws, injection,
forecasts."""
