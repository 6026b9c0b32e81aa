"""pyserial URL handlers of taprig, found by ``serial.serial_for_url`` as ``protocol_<scheme>`` modules.

:mod:`taprig.link` appends this package to ``serial.protocol_handler_packages`` on import, so that
``serial_for_url("sim://...")`` resolves to ``taprig.link.handlers.protocol_sim``, with the same call as a real port.
"""
