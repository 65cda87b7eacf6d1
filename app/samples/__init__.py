"""Bottle samples analysed in a lab: the alkalinity-salinity line and the pH sensor check."""
