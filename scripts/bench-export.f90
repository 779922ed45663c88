! Timing harness of the Fortran export for scripts/bench-export.ts: calls tilewise_policy_act on
! a batch of tiles (observations from the first argument, real64 obs(obs_dim, n), stream access)
! repeatedly for about the second argument's seconds, in rounds, and prints
! "tiles calls seconds" of the fastest round.
program bench_export
  use, intrinsic :: iso_fortran_env, only: real64, int64
  use tilewise_policy, only: tilewise_policy_act, tilewise_policy_obs_dim, tilewise_policy_act_dim
  implicit none
  character(len=4096) :: path, arg
  integer :: u, n, bytes, round
  integer(int64) :: calls, k, c0, c1, rate
  real(real64), allocatable :: obs(:, :), actions(:, :)
  real(real64) :: seconds, t, best, sink
  call get_command_argument(1, path)
  call get_command_argument(2, arg)
  read (arg, *) seconds
  inquire (file=trim(path), size=bytes)
  n = bytes / (8 * tilewise_policy_obs_dim)
  allocate (obs(tilewise_policy_obs_dim, n), actions(tilewise_policy_act_dim, n))
  open (newunit=u, file=trim(path), access='stream', form='unformatted', status='old', action='read')
  read (u) obs
  close (u)
  call system_clock(count_rate=rate)
  calls = 1
  sink = 0
  do
    call system_clock(c0)
    do k = 1, calls
      call tilewise_policy_act(n, obs, actions)
    end do
    call system_clock(c1)
    if (real(c1 - c0, real64) / real(rate, real64) > seconds / 5 .or. calls > 2_int64**30) exit
    calls = calls * 2
  end do
  best = huge(1.0_real64)
  do round = 1, 5
    call system_clock(c0)
    do k = 1, calls
      call tilewise_policy_act(n, obs, actions)
      sink = sink + actions(1, 1 + mod(k, int(n, int64)))
    end do
    call system_clock(c1)
    t = real(c1 - c0, real64) / real(rate, real64)
    best = min(best, t)
  end do
  print '(i0, 1x, i0, 1x, es16.9, 1x, es12.4)', n, calls, best, sink
end program bench_export
