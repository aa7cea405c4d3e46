! The Fortran module: a diagonally dominant float64 system with the known solution
! X = ones (B = A ones: row sums), filled and read through block arrays, and the status
! and message of calls that must fail. Exit code 1 if any check failed.
program test_fortran
  use, intrinsic :: iso_c_binding
  use mpi
  use gridlu
  implicit none
  integer, parameter :: n = 143, nb = 16
  integer :: ierr, rank, failures
  type(c_ptr) :: grid, a, x, b, f, g, missing
  type(gridlu_trust) :: trust
  real(c_double) :: worst, corner

  call MPI_Init(ierr)
  call MPI_Comm_rank(MPI_COMM_WORLD, rank, ierr)
  failures = 0
  call check(gridlu_grid_create(MPI_COMM_WORLD, 0, 0, grid) == GRIDLU_OK, 'grid')
  call check(gridlu_matrix_create(grid, GRIDLU_FLOAT64, int(n, c_int64_t), int(n, c_int64_t), &
                                  int(nb, c_int64_t), a) == GRIDLU_OK, 'create A')
  call check(gridlu_matrix_create(grid, GRIDLU_FLOAT64, int(n, c_int64_t), 1_c_int64_t, &
                                  int(nb, c_int64_t), b) == GRIDLU_OK, 'create B')
  call check(gridlu_matrix_create(grid, GRIDLU_FLOAT64, int(n, c_int64_t), 1_c_int64_t, &
                                  int(nb, c_int64_t), x) == GRIDLU_OK, 'create X')
  call fill(a, .false.)
  call fill(b, .true.)
  call fill(x, .true.)
  call check(gridlu_matrix_get(a, 2_c_int64_t, 2_c_int64_t, corner) == GRIDLU_OK, 'get')
  call check(abs(corner - entry(2_c_int64_t, 2_c_int64_t)) <= 0, 'entry (2, 2) as filled')

  call check(gridlu_factor(a, f, lookahead=2) == GRIDLU_OK, 'factor')
  call check(gridlu_solve(f, GRIDLU_SYSTEM_A, x) == GRIDLU_OK, 'solve')
  ! Condition number near 1: X within a few hundred u of ones (common practice).
  worst = distance_from_ones(x)
  call check(worst < 1d-13, 'X is ones')
  call check(gridlu_check(f, GRIDLU_SYSTEM_A, x, b, 0d0, trust) == GRIDLU_OK, 'check')
  call check(trust%backward_error < 100 * trust%unit_roundoff, 'backward error')
  call check(trust%flags == 0 .and. trust%trusted_digits >= 13, 'trusted')

  ! Failures: a status and a message.
  call check(gridlu_solve(f, GRIDLU_SYSTEM_A, c_null_ptr) == GRIDLU_ERROR_USAGE, 'null X')
  call check(index(gridlu_last_error(), 'NULL') > 0, 'message of null X')
  call check(gridlu_matrix_read(grid, '/nonexistent/gridlu-missing.h5', 'A', GRIDLU_FLOAT64, &
                                0_c_int64_t, missing) == GRIDLU_ERROR_INPUT, 'missing file')
  call check(len(gridlu_last_error()) > 0, 'message of missing file')
  call check(gridlu_factor(a, g, checkpoint_dir='', stop_after_seconds=1d0) &
             == GRIDLU_ERROR_USAGE, 'stop without a checkpoint directory')
  call check(len(gridlu_last_error()) > 0, 'message of stop')

  call check(gridlu_factorization_free(f) == GRIDLU_OK, 'free factors')
  call check(gridlu_matrix_free(a) == GRIDLU_OK .and. gridlu_matrix_free(b) == GRIDLU_OK &
             .and. gridlu_matrix_free(x) == GRIDLU_OK, 'free matrices')
  call check(gridlu_grid_free(grid) == GRIDLU_OK, 'free grid')
  call check(gridlu_last_error() == '', 'no message after a success')

  call MPI_Allreduce(MPI_IN_PLACE, failures, 1, MPI_INTEGER, MPI_SUM, MPI_COMM_WORLD, ierr)
  if (rank == 0) print '(i0, a)', failures, ' failed checks'
  call MPI_Finalize(ierr)
  if (failures /= 0) error stop 1

contains

  subroutine check(ok, what)
    logical, intent(in) :: ok
    character(*), intent(in) :: what
    if (.not. ok) then
      failures = failures + 1
      write (*, '(a, i0, 4a)') 'rank ', rank, ': ', what, ': ', gridlu_last_error()
    end if
  end subroutine

  ! A pure function of the 0-based (i, j) in [-1, 1], with a dominant diagonal.
  real(c_double) function entry(i, j)
    integer(c_int64_t), value :: i, j
    entry = modulo(real(i * 37 + j * 101, c_double) * 0.6180339887d0, 2d0) - 1
    if (i == j) entry = entry + 2 * n
  end function

  ! A's entries, or its row sums (B = A ones), through this rank's blocks.
  subroutine fill(m, row_sums)
    type(c_ptr), intent(in) :: m
    logical, intent(in) :: row_sums
    type(gridlu_block) :: blk
    real(c_double), pointer :: v(:, :)
    integer(c_int64_t) :: count, k, r, c, j
    call check(gridlu_matrix_block_count(m, count) == GRIDLU_OK, 'block count')
    do k = 0, count - 1
      call check(gridlu_matrix_block(m, k, blk) == GRIDLU_OK, 'block')
      call gridlu_block_array(blk, v)
      do c = 1, blk%cols
        do r = 1, blk%rows
          if (row_sums) then
            v(r, c) = 0
            do j = 0, n - 1
              v(r, c) = v(r, c) + entry(blk%row + r - 1, j)
            end do
          else
            v(r, c) = entry(blk%row + r - 1, blk%col + c - 1)
          end if
        end do
      end do
    end do
  end subroutine

  real(c_double) function distance_from_ones(m) result(d)
    type(c_ptr), intent(in) :: m
    type(gridlu_block) :: blk
    real(c_double), pointer :: v(:, :)
    integer(c_int64_t) :: count, k
    d = 0
    call check(gridlu_matrix_block_count(m, count) == GRIDLU_OK, 'block count')
    do k = 0, count - 1
      call check(gridlu_matrix_block(m, k, blk) == GRIDLU_OK, 'block')
      call gridlu_block_array(blk, v)
      d = max(d, maxval(abs(v(1:blk%rows, 1:blk%cols) - 1)))
    end do
    call MPI_Allreduce(MPI_IN_PLACE, d, 1, MPI_DOUBLE_PRECISION, MPI_MAX, MPI_COMM_WORLD, ierr)
  end function

end program
