"""Protolyte's chemistry core: thermodynamic data, activity models, the charge-balance
solver, alkalinity, calibration and dosing. Pure numpy/scipy; nothing here knows HTTP."""
