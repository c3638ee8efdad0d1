"""Built-in detector plug-ins for benchkit, one module each."""
