"""Alarm rules, sequential calibration charts, window rules, alarm states and backtests."""
