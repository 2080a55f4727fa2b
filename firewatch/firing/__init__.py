"""The model of a firing: from readings to decisions.

:mod:`.pipeline` converts thermocouples and reconciles pyrometers batch by batch,
:mod:`.progress` follows the schedule, :mod:`.rates` measures rates of change,
:mod:`.alarms` raises alarms with their likely cause, :mod:`.tuning` fits a pyrometer
against thermocouple references and :mod:`.profile_writer` writes the result back into
a site profile. Imports settings, physics and the reading records of the transport;
never the store, the services or the interface.
"""
