"""Models several test modules share (imported by name: pytest puts ``tests/`` on the path for its conftest)."""

# Immigration, loss and dimerisation: a few tenths of a second per task of 20-200 replicates, the
# work the resume, shard and Slurm tests interrupt, kill and resubmit.
DIMERISING = """
[model.species]
A = 0
B = 0
[model.parameters]
k = 400.0
g = 1.0
h = 0.01
[model.reactions]
make = { reaction = "0 -> A", rate = "k" }
loss = { reaction = "A -> 0", rate = "g" }
pair = { reaction = "2 A -> B", rate = "h" }
"""

# 30 A pairing reversibly into B: every state keeps A + 2B = 30, a cheap check of each count
PAIRING = """
[model.species]
A = 30
B = 0
[model.parameters]
c1 = 0.02
c2 = 0.5
[model.reactions]
bind = { reaction = "2 A -> B", rate = "c1" }
split = { reaction = "B -> 2 A", rate = "c2" }
"""
