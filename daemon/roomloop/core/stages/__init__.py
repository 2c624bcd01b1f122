"""The control law's stages, one module per rule, in the order a step runs them.

Each stage is a pure function of frozen values (the zone state, the settings, the
per-settings :class:`~roomloop.core.stages.constants.LawConstants`, numbers) to a
frozen value (a number, a tuple); :meth:`roomloop.core.controller.ZoneController.step`
composes them:

1. :mod:`.anticipator` - the virtual heat term over the elapsed tick;
2. :mod:`.points` - each point judged, the trusted ones combined into ``T``;
3. :mod:`.smoothing` - the temperature the relay switches on;
4. :mod:`.expiry` - commands that expire (a hold's end, a level override's);
5. :mod:`.setpoint` - ``S`` from mode and level, clamped;
6. :mod:`.failsafe` - entering and leaving fail-safe, the learned duty;
7. :mod:`.recovery` - after a set-point change, until the relay cycles again;
8. :mod:`.protection` - the protection run;
9. :mod:`.relay` - the relay's precedence, one ordered table over
   :mod:`.switching` (the band);
10. :mod:`.short_cycle` - minimum on and off times, the cycle limit, the switch log;
11. :mod:`.regulation` - cycle-rate regulation of the anticipator's time constant;
12. :mod:`.droop` - droop compensation with anti-windup;
13. :mod:`.figures` - the last hour's cycles and on-time fraction.
"""
