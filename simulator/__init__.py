"""The simulated plant: ``plant`` (the model), ``feed`` (in-process feed), ``history`` (bulk
readings), ``opcua_server`` (OPC UA), ``link`` (a cuttable TCP proxy), ``cli`` (``fishway
simulate``). Import from the modules; nothing is re-exported here."""
