"""Batch systems: site settings (``settings``), job scripts and ``sbatch`` (``submit``), and the
wall-time a job has left (``walltime``)."""
