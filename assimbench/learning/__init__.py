"""Settings and forecast-model parameters learned by gradients through the cycle."""
