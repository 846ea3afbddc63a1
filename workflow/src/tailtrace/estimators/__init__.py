"""Estimators of VaR and ES sharing one contract (see :mod:`.base`)."""
