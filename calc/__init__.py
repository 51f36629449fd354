"""Pure computation for isentrope: steam properties, section performance, degradation.

Nothing in this package does I/O, reads the clock or logs. Inputs and outputs are in
IAPWS-IF97's own units: MPa (absolute), K, kJ/kg, kJ/(kg K), m3/kg, kg/s, MW.
"""
