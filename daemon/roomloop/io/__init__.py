"""Field I/O: Modbus links, MQTT points and the broker connection.

Knows nothing of the service. The service builds one :class:`ModbusLink` per
Modbus link and one :class:`MqttPoints` for the MQTT points, runs each link's
``run()`` in a task, routes broker messages to the MQTT points, and reads them
all through the :class:`InputSource` / :class:`OutputSink` shapes.
Import the submodules directly (``roomloop.io.modbus``) to avoid loading
pymodbus where only MQTT is used.
"""

from roomloop.io.ports import InputSource, OutputSink, OutputState, OutputVerdict

__all__ = ["InputSource", "OutputSink", "OutputState", "OutputVerdict"]
