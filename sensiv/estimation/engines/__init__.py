"""Engines that run the two passes over the rows outside the in-process numpy stream."""
