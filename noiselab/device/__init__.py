"""Device noise profiles (YAML), scaling, qiskit-aer noise models and compilation to a device."""
