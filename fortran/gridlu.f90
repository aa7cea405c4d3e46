! gridlu from Fortran: the C interface (gridlu/gridlu.h) through iso_c_binding. Handles
! are type(c_ptr); every function returns a status (GRIDLU_OK = 0) and gridlu_last_error()
! says why a call failed. Indices are 0-based, as in C. Communicators are Fortran integer
! handles (MPI_COMM_WORLD of `use mpi`, or %MPI_VAL of an mpi_f08 communicator), so this
! module needs no MPI module itself. Handles and kinds come from iso_c_binding.
module gridlu
  use, intrinsic :: iso_c_binding
  implicit none
  private

  integer(c_int), parameter, public :: GRIDLU_OK = 0, GRIDLU_ERROR_INTERNAL = 1, &
    GRIDLU_ERROR_USAGE = 2, GRIDLU_ERROR_INPUT = 3, GRIDLU_ERROR_NUMERICAL = 4, &
    GRIDLU_ERROR_STOPPED = 5, GRIDLU_ERROR_RESOURCE = 6
  integer(c_int), parameter, public :: GRIDLU_FLOAT32 = 0, GRIDLU_FLOAT64 = 1, &
    GRIDLU_COMPLEX64 = 2, GRIDLU_COMPLEX128 = 3
  integer(c_int), parameter, public :: GRIDLU_SYSTEM_A = 0, GRIDLU_SYSTEM_TRANSPOSE = 1, &
    GRIDLU_SYSTEM_ADJOINT = 2
  integer(c_int), parameter, public :: GRIDLU_PRECISION_WORKING = 0, &
    GRIDLU_PRECISION_MIXED = 1, GRIDLU_PRECISION_MIXED_KRYLOV = 2
  integer(c_int), parameter, public :: GRIDLU_FLAG_BACKWARD_ERROR_HIGH = 1, &
    GRIDLU_FLAG_ILL_CONDITIONED = 2, GRIDLU_FLAG_GROWTH_LARGE = 4

  ! One block of this rank's part (0-based global indices of its first entry); its
  ! entries as an array: gridlu_block_array.
  type, bind(c), public :: gridlu_block
    integer(c_int64_t) :: row, col, rows, cols, ld
    type(c_ptr) :: data
  end type

  type, bind(c), public :: gridlu_trust
    real(c_double) :: unit_roundoff, condition, backward_error, forward_bound
    integer(c_int) :: trusted_digits, flags
  end type

  type, bind(c) :: factor_options
    integer(c_int) :: lookahead, precision
    type(c_ptr) :: checkpoint_dir
    real(c_double) :: checkpoint_seconds, stop_after_seconds
  end type

  public :: gridlu_last_error, gridlu_grid_create, gridlu_grid_shape, gridlu_grid_free
  public :: gridlu_matrix_create, gridlu_matrix_free, gridlu_matrix_info, gridlu_matrix_fill
  public :: gridlu_matrix_block_count, gridlu_matrix_block, gridlu_block_array, gridlu_matrix_get
  public :: gridlu_matrix_read, gridlu_matrix_write
  public :: gridlu_factor, gridlu_factorization_free, gridlu_solve, gridlu_check
  public :: gridlu_problem_sphere, gridlu_problem_cube, gridlu_problem_free
  public :: gridlu_problem_size, gridlu_problem_panel, gridlu_problem_entry
  public :: gridlu_problem_entry_error

  ! A Fortran pointer onto a block's entries, shape (ld, cols): a(1:rows, :) is the block.
  interface gridlu_block_array
    module procedure block_array_real, block_array_complex
  end interface

  interface
    function c_last_error() result(p) bind(c, name="gridlu_last_error")
      import :: c_ptr
      type(c_ptr) :: p
    end function
    function c_strlen(s) result(n) bind(c, name="strlen")
      import :: c_ptr, c_size_t
      type(c_ptr), value :: s
      integer(c_size_t) :: n
    end function
    function c_grid_create(comm, p, q, grid) result(s) bind(c, name="gridlu_grid_create_f")
      import :: c_int, c_ptr
      integer(c_int), value :: comm, p, q
      type(c_ptr) :: grid
      integer(c_int) :: s
    end function
    function gridlu_grid_shape(grid, p, q, myrow, mycol) result(s) bind(c)
      import :: c_int, c_ptr
      type(c_ptr), value :: grid
      integer(c_int) :: p, q, myrow, mycol, s
    end function
    function gridlu_grid_free(grid) result(s) bind(c)
      import :: c_int, c_ptr
      type(c_ptr), value :: grid
      integer(c_int) :: s
    end function
    function gridlu_matrix_create(grid, type, rows, cols, block, matrix) result(s) bind(c)
      import :: c_int, c_int64_t, c_ptr
      type(c_ptr), value :: grid
      integer(c_int), value :: type
      integer(c_int64_t), value :: rows, cols, block
      type(c_ptr) :: matrix
      integer(c_int) :: s
    end function
    function gridlu_matrix_free(matrix) result(s) bind(c)
      import :: c_int, c_ptr
      type(c_ptr), value :: matrix
      integer(c_int) :: s
    end function
    function gridlu_matrix_info(matrix, type, rows, cols, block) result(s) bind(c)
      import :: c_int, c_int64_t, c_ptr
      type(c_ptr), value :: matrix
      integer(c_int) :: type, s
      integer(c_int64_t) :: rows, cols, block
    end function
    ! entry: a bind(c) subroutine (i, j: integer(c_int64_t), value; value, user: c_ptr, value)
    function gridlu_matrix_fill(matrix, entry, user) result(s) bind(c)
      import :: c_int, c_ptr, c_funptr
      type(c_ptr), value :: matrix, user
      type(c_funptr), value :: entry
      integer(c_int) :: s
    end function
    function gridlu_matrix_block_count(matrix, count) result(s) bind(c)
      import :: c_int, c_int64_t, c_ptr
      type(c_ptr), value :: matrix
      integer(c_int64_t) :: count
      integer(c_int) :: s
    end function
    function gridlu_matrix_block(matrix, b, block) result(s) bind(c)
      import :: c_int, c_int64_t, c_ptr, gridlu_block
      type(c_ptr), value :: matrix
      integer(c_int64_t), value :: b
      type(gridlu_block) :: block
      integer(c_int) :: s
    end function
    ! value: a variable of the matrix's type (real or complex, c_float or c_double)
    function gridlu_matrix_get(matrix, i, j, value) result(s) bind(c)
      import :: c_int, c_int64_t, c_ptr
      type(c_ptr), value :: matrix
      integer(c_int64_t), value :: i, j
      type(*) :: value
      integer(c_int) :: s
    end function
    function c_matrix_read(grid, path, dataset, type, block, matrix) result(s) &
        bind(c, name="gridlu_matrix_read")
      import :: c_int, c_int64_t, c_ptr, c_char
      type(c_ptr), value :: grid
      character(kind=c_char) :: path(*), dataset(*)
      integer(c_int), value :: type
      integer(c_int64_t), value :: block
      type(c_ptr) :: matrix
      integer(c_int) :: s
    end function
    function c_matrix_write(matrix, path, dataset, replace) result(s) &
        bind(c, name="gridlu_matrix_write")
      import :: c_int, c_ptr, c_char
      type(c_ptr), value :: matrix
      character(kind=c_char) :: path(*), dataset(*)
      integer(c_int), value :: replace
      integer(c_int) :: s
    end function
    subroutine c_factor_options_init(options) bind(c, name="gridlu_factor_options_init")
      import :: factor_options
      type(factor_options) :: options
    end subroutine
    function c_factor(a, options, factors) result(s) bind(c, name="gridlu_factor")
      import :: c_int, c_ptr, factor_options
      type(c_ptr), value :: a
      type(factor_options) :: options
      type(c_ptr) :: factors
      integer(c_int) :: s
    end function
    function gridlu_factorization_free(factors) result(s) bind(c)
      import :: c_int, c_ptr
      type(c_ptr), value :: factors
      integer(c_int) :: s
    end function
    function gridlu_solve(factors, system, x) result(s) bind(c)
      import :: c_int, c_ptr
      type(c_ptr), value :: factors, x
      integer(c_int), value :: system
      integer(c_int) :: s
    end function
    function gridlu_check(factors, system, x, b, entry_error, trust) result(s) bind(c)
      import :: c_int, c_ptr, c_double, gridlu_trust
      type(c_ptr), value :: factors, x, b
      integer(c_int), value :: system
      real(c_double), value :: entry_error
      type(gridlu_trust) :: trust
      integer(c_int) :: s
    end function
    function gridlu_problem_sphere(subdivisions, radius, wavenumber, problem) result(s) bind(c)
      import :: c_int, c_double, c_ptr
      integer(c_int), value :: subdivisions
      real(c_double), value :: radius, wavenumber
      type(c_ptr) :: problem
      integer(c_int) :: s
    end function
    function gridlu_problem_cube(divisions, side, problem) result(s) bind(c)
      import :: c_int, c_double, c_ptr
      integer(c_int), value :: divisions
      real(c_double), value :: side
      type(c_ptr) :: problem
      integer(c_int) :: s
    end function
    function gridlu_problem_free(problem) result(s) bind(c)
      import :: c_int, c_ptr
      type(c_ptr), value :: problem
      integer(c_int) :: s
    end function
    function gridlu_problem_size(problem, panels) result(s) bind(c)
      import :: c_int, c_int64_t, c_ptr
      type(c_ptr), value :: problem
      integer(c_int64_t) :: panels
      integer(c_int) :: s
    end function
    function gridlu_problem_panel(problem, j, centroid, area) result(s) bind(c)
      import :: c_int, c_int64_t, c_double, c_ptr
      type(c_ptr), value :: problem
      integer(c_int64_t), value :: j
      real(c_double) :: centroid(3), area
      integer(c_int) :: s
    end function
    function gridlu_problem_entry(problem, i, j, re, im) result(s) bind(c)
      import :: c_int, c_int64_t, c_double, c_ptr
      type(c_ptr), value :: problem
      integer(c_int64_t), value :: i, j
      real(c_double) :: re, im
      integer(c_int) :: s
    end function
    function gridlu_problem_entry_error(problem, entry_error) result(s) bind(c)
      import :: c_int, c_double, c_ptr
      type(c_ptr), value :: problem
      real(c_double) :: entry_error
      integer(c_int) :: s
    end function
  end interface

contains

  ! The message of this thread's last failed call ("" after a success).
  function gridlu_last_error() result(message)
    character(:), allocatable :: message
    type(c_ptr) :: p
    character(kind=c_char), pointer :: chars(:)
    integer :: k
    p = c_last_error()
    call c_f_pointer(p, chars, [c_strlen(p)])
    allocate (character(size(chars)) :: message)
    do k = 1, size(chars)
      message(k:k) = chars(k)
    end do
  end function

  ! A p x q grid over the Fortran communicator comm (p = q = 0: the default shape).
  function gridlu_grid_create(comm, p, q, grid) result(s)
    integer, intent(in) :: comm, p, q
    type(c_ptr), intent(out) :: grid
    integer(c_int) :: s
    s = c_grid_create(int(comm, c_int), int(p, c_int), int(q, c_int), grid)
  end function

  subroutine block_array_real(block, a)
    type(gridlu_block), intent(in) :: block
    real(c_double), pointer, intent(out) :: a(:, :)
    call c_f_pointer(block%data, a, [block%ld, block%cols])
  end subroutine

  subroutine block_array_complex(block, a)
    type(gridlu_block), intent(in) :: block
    complex(c_double_complex), pointer, intent(out) :: a(:, :)
    call c_f_pointer(block%data, a, [block%ld, block%cols])
  end subroutine

  function gridlu_matrix_read(grid, path, dataset, type, block, matrix) result(s)
    type(c_ptr), intent(in) :: grid
    character(*), intent(in) :: path, dataset
    integer(c_int), intent(in) :: type
    integer(c_int64_t), intent(in) :: block
    type(c_ptr), intent(out) :: matrix
    integer(c_int) :: s
    s = c_matrix_read(grid, path//c_null_char, dataset//c_null_char, type, block, matrix)
  end function

  ! Writes into a new file; replace = .true. replaces an existing one.
  function gridlu_matrix_write(matrix, path, dataset, replace) result(s)
    type(c_ptr), intent(in) :: matrix
    character(*), intent(in) :: path, dataset
    logical, intent(in), optional :: replace
    integer(c_int) :: s, r
    r = 0
    if (present(replace)) then
      if (replace) r = 1
    end if
    s = c_matrix_write(matrix, path//c_null_char, dataset//c_null_char, r)
  end function

  ! Factors the square matrix a; options left out keep the C interface's defaults.
  function gridlu_factor(a, factors, lookahead, precision, checkpoint_dir, &
                         checkpoint_seconds, stop_after_seconds) result(s)
    type(c_ptr), intent(in) :: a
    type(c_ptr), intent(out) :: factors
    integer, intent(in), optional :: lookahead, precision
    character(*), intent(in), optional :: checkpoint_dir
    real(c_double), intent(in), optional :: checkpoint_seconds, stop_after_seconds
    integer(c_int) :: s
    type(factor_options) :: o
    character(kind=c_char, len=:), allocatable, target :: dir
    call c_factor_options_init(o)
    if (present(lookahead)) o%lookahead = int(lookahead, c_int)
    if (present(precision)) o%precision = int(precision, c_int)
    if (present(checkpoint_dir)) then
      dir = checkpoint_dir//c_null_char
      o%checkpoint_dir = c_loc(dir)
    end if
    if (present(checkpoint_seconds)) o%checkpoint_seconds = checkpoint_seconds
    if (present(stop_after_seconds)) o%stop_after_seconds = stop_after_seconds
    s = c_factor(a, o, factors)
  end function

end module gridlu
