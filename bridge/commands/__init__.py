"""The command layer's choices: defaults the command line leaves open."""
