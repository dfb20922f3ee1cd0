"""bandwatch's terminal interface and command line (renders results, sends commands)."""
