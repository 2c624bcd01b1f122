"""Field I/O: Modbus links, MQTT points and the broker connection. Knows nothing of the service.

What is here (the service wires it, in ``roomloop.service``):

* ``modbus.ModbusLink``: one Modbus link with its input and output points; polls
  every ``poll_interval_s`` (``run``), re-asserts its outputs, reconnects by itself;
* ``mqtt.MqttPoints``: every MQTT input and output point of the site, fed by the
  service's broker connection (``handle`` for each message, ``tick`` for read-back
  timeouts and re-assertion);
* ``broker.BrokerConnection``: the broker session, reconnecting with backoff.

Each takes a :class:`roomloop.clock.Clock` for its time reads, pauses and timeouts
(the real clock by default).

Import the submodules directly; this package only re-exports the small shapes.
"""

from roomloop.io.ports import InputSource, OutputSink, OutputState, OutputVerdict

__all__ = ["InputSource", "OutputSink", "OutputState", "OutputVerdict"]
