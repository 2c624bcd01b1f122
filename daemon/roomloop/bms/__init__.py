"""The BMS face: roomloop's own Modbus server for a building management system."""
