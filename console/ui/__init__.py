"""The operator console: a Textual drive screen that shows the control loop's snapshots and sends operator requests.

The UI never calls the shaper or the transport: it reads `ControlLoop.snapshot()` and calls
`request / arm / stop / operator_alive / ui_alive` only.
"""
