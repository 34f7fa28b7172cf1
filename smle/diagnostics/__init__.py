"""Diagnostics: the likelihood health check, the weight tail, filtering, goodness of fit and
their figures."""
