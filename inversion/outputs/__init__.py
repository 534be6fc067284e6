"""How every command writes a result folder, and knows a run again.

- `folder`: the output lock, the manifest, staging, publishing and the one replace rule;
- `identity`: the resume fingerprint of a run and the versions it ran with;
- `formats`: the figure format a command was asked for, checked once.
"""
