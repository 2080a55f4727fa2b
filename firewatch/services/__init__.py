"""Long-running jobs: the recorder, MQTT publishing, the plant state and replay.

:mod:`.recorder` reads a port, runs the firing model and is the log's only writer;
:mod:`.mqtt` connects to a broker and publishes from the log's outbox;
:mod:`.plant` keeps the plant-wide state seen over MQTT; :mod:`.replay` runs a recorded
firing through the model again; :mod:`.desk` takes a viewer's operator actions to the recorder,
or writes them itself while no recorder runs. Imports the store, the firing model and the transport.
"""
