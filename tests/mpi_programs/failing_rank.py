"""Under ``mpiexec -n 2``: rank 1 fails in the caller's own code while rank 0 has entered a
global quantity (a collective call). Inside :func:`emsource.patches.abort_on_error` every
rank ends with an error; without it rank 0 would wait for rank 1 forever."""

from mpi4py import MPI

from emsource import exact
from emsource.grid import UniformGrid
from emsource.integrals import integrate_level_arrays
from emsource.patches import abort_on_error, decompose

comm = MPI.COMM_WORLD
grid = UniformGrid.from_bounds((0.0, 0.0, 0.0), (1.0, 0.9, 0.7), (13, 12, 11))
patch = decompose(grid, comm.Get_rank(), comm.Get_size(), ghost=2)
with abort_on_error(comm):
    d = exact.plane_wave_gauge_wave(patch, 0.1)
    if comm.Get_rank() == 1:
        raise RuntimeError("the caller's right-hand side blew up on this rank")
    integrate_level_arrays(patch, d.gamma, d.E, d.B, comm=comm)
print("rank", comm.Get_rank(), "finished", flush=True)
