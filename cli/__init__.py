"""The iqdemod command line (installed as the package ``iqdemod_cli``)."""
