"""What a run leaves on disk: the run folder, writable outputs, and the saved policy (spec and weights).

File names, atomic writes, the folder lock, the result record, and the pickle-free policy format
live here, so that training, evaluation, comparison and export all read and write them one way.
"""
