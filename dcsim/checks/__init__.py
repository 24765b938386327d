"""Design checks: verdicts on fuse coordination, regeneration, thermal and duty, loop margins."""
