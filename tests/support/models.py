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
