"""The end-to-end demo: an invented courier's six months of traffic through a real Calibrant."""
