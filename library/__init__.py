"""olibra: odorant library database with shape and vibration similarity search."""
