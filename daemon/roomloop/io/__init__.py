"""Field I/O: Modbus links, MQTT points and the broker connection. Knows nothing of the service.

How the service wires it (every call here is public API)::

    from roomloop.io.wiring import modbus_links, mqtt_points, input_sources, output_sinks
    from roomloop.io.broker import BrokerConnection, LastWill

    links = modbus_links(site)                 # one ModbusLink per Modbus link
    mqtt = mqtt_points(site)                   # one MqttPoints for every MQTT point
    async with contextlib.AsyncExitStack() as stack:
        for link in links:
            await stack.enter_async_context(link)   # never fails; reconnects by itself
            tg.create_task(link.run())              # poll every poll_interval_s, re-assert outputs
        conn = BrokerConnection(site.broker, will=LastWill(f"{prefix}/status", "offline"))

        async def on_connect(client):               # after every (re)connect
            for topic in mqtt.topics():
                await client.subscribe(topic, qos=1)
            mqtt.attach(client)
            await mqtt.publish_commands(client)

        def on_message(message):
            if not mqtt.handle(message.topic.value, message.payload, time.time()):
                ...                                 # the service's own topics (commands)

        tg.create_task(conn.run(on_message, on_connect=on_connect, on_disconnect=mqtt.detach))
        # each tick:
        samples = {}
        for source in input_sources(links, mqtt):
            samples.update(source.samples(now))
        sink = output_sinks(links, mqtt)[zone.output]
        if demand != sink.output_state(zone.output).wanted:   # write on change only;
            await sink.set_output(zone.output, demand)         # the links re-assert by themselves
        await mqtt.tick(now)                        # read-back timeouts, re-assertion

Import the submodules directly; this package only re-exports the small shapes.
"""

from roomloop.io.ports import InputSource, OutputSink, OutputState, OutputVerdict

__all__ = ["InputSource", "OutputSink", "OutputState", "OutputVerdict"]
