"""Instruments: VISA sessions, IEEE 488.2 helpers, the driver-file interpreter, role adapters.

Layers, bottom up (each module one idea):

- ieee4882   arbitrary blocks, *IDN? and SYSTem:ERRor? answers (pure functions)
- template   safe substitution of {placeholders} in driver command templates
- driverfile driver-file schema, loader with located errors, driver search path
- link       Link: the one place every transaction passes (counted, timed, observed, faults)
- interpreter DriverSession: runs a driver file's operations over a Link
- driver_roles DriverSource, DriverScope, DriverMeter: the role protocols of roles.py
- bench      open_bench(plan): sessions, drivers, identities, safe close
- transport  below VISA: TCP_NODELAY on pyvisa-py raw sockets
- discovery  list a backend's resources, *IDN? each, suggest driver files
- driver_check, driver_try  `sweeper driver check` / `driver try`: validate, self-test
- roles      the role protocols and data records the engine uses (the contract)
"""
