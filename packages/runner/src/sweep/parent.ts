/**
 * Notice that the process that started this one is gone. The IPC channel's 'disconnect' event is
 * the usual sign, but it was seen not to arrive in a sandboxed run whose worker was killed with
 * SIGKILL mid-run (the run went on training in a directory another worker had taken over), so
 * the parent's pid is also polled: an orphan is re-parented, and its ppid changes.
 */
export function onParentGone(callback: (why: string) => void, everyMs = 500): void {
  const parent = process.ppid;
  let told = false;
  const tell = (why: string): void => {
    if (told) return;
    told = true;
    clearInterval(timer);
    callback(why);
  };
  process.on('disconnect', () => tell('the IPC channel to the parent closed'));
  const timer = setInterval(() => {
    if (process.ppid !== parent) tell(`the parent process ${parent} is gone`);
  }, everyMs);
  timer.unref();
}
