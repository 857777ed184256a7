"""Calibration internals: linear models (:mod:`~screen.calibration.linear`), reference sets and material
families (:mod:`~screen.calibration.reference`), model selection and grouped validation
(:mod:`~screen.calibration.validation`), the optical-gap model (:mod:`~screen.calibration.optical`) and the
film HOMO/LUMO models (:mod:`~screen.calibration.film`). The public entry points are in :mod:`screen.calibrate`.
"""
