/**
 * What an operating-system error means for the user: a code of ours, the reason in words and what
 * to do. Pure data (no error class here), so src/errors.ts can build its errors from it without
 * an import cycle, and worker threads can use it when they send an error over.
 *
 * Node's system errors carry `code` (the errno name: EACCES, ENOSPC …), and usually `syscall` and
 * `path`; everything that reaches the user names the path and the operation from those.
 */

/** Codes an operating-system failure maps to (all exit 1). */
export type SystemErrorCode = 'RDK_IO' | 'RDK_PERMISSION' | 'RDK_DISK_FULL' | 'RDK_TOO_MANY_OPEN_FILES';

export interface SystemErrorMeaning {
  code: SystemErrorCode;
  /** The errno name, e.g. `EACCES`. */
  errno: string;
  /** What went wrong, in a few words (no capital, no full stop). */
  reason: string;
  /** What to do, one or two sentences. */
  hint: string;
}

const MEANINGS: Record<string, Omit<SystemErrorMeaning, 'errno'>> = {
  EACCES: { code: 'RDK_PERMISSION', reason: 'permission denied', hint: 'Check the permissions of this path and of the folders above it, or choose another place.' },
  EPERM: { code: 'RDK_PERMISSION', reason: 'operation not permitted', hint: 'Check the permissions and attributes (e.g. immutable files) of this path, or choose another place.' },
  EROFS: { code: 'RDK_PERMISSION', reason: 'read-only file system', hint: 'Choose a folder on a writable file system (--out, --temp-dir).' },
  ENOSPC: { code: 'RDK_DISK_FULL', reason: 'no space left on the device', hint: 'Free some space, or put the output (--out) or the spill (--temp-dir, about 1.3 times the input) on a disk with more room.' },
  EDQUOT: { code: 'RDK_DISK_FULL', reason: 'disk quota exceeded', hint: 'Free some space within your quota, or write to another disk (--out, --temp-dir).' },
  EFBIG: { code: 'RDK_DISK_FULL', reason: 'file too large for this file system', hint: 'Write to another file system, or use more --partitions so each file is smaller.' },
  EMFILE: { code: 'RDK_TOO_MANY_OPEN_FILES', reason: 'too many open files (the limit of this process)', hint: 'Raise the limit (ulimit -n), or use fewer --threads.' },
  ENFILE: { code: 'RDK_TOO_MANY_OPEN_FILES', reason: 'too many open files on this system', hint: 'Close other programs, or use fewer --threads.' },
  ENOTDIR: { code: 'RDK_IO', reason: 'a part of the path is not a folder', hint: 'Check the path: a file stands where a folder is expected.' },
  EISDIR: { code: 'RDK_IO', reason: 'it is a folder, not a file', hint: 'Give a file.' },
  EEXIST: { code: 'RDK_IO', reason: 'it already exists', hint: 'Choose another path, or remove what is there.' },
  ENOTEMPTY: { code: 'RDK_IO', reason: 'the folder is not empty', hint: 'Choose another path, or empty the folder.' },
  EBUSY: { code: 'RDK_IO', reason: 'it is busy (in use, or a mount point)', hint: 'Choose another path.' },
  ENOENT: { code: 'RDK_IO', reason: 'no such file or folder', hint: 'Check the path; a folder above it may have been removed.' },
  ELOOP: { code: 'RDK_IO', reason: 'too many symbolic links', hint: 'Check the path for a symbolic link that points to itself.' },
  ENAMETOOLONG: { code: 'RDK_IO', reason: 'the name is too long', hint: 'Choose a shorter path.' },
  EIO: { code: 'RDK_IO', reason: 'input/output error (the device reported a fault)', hint: 'Check the disk and the system log.' },
  ENXIO: { code: 'RDK_IO', reason: 'no such device', hint: 'Check the path.' },
  EXDEV: { code: 'RDK_IO', reason: 'cannot move across file systems', hint: 'Choose paths on one file system.' },
  ETXTBSY: { code: 'RDK_IO', reason: 'the file is busy', hint: 'Try again once the other program is done with it.' },
  EINVAL: { code: 'RDK_IO', reason: 'the system refused the request as invalid for this path', hint: 'Choose another path (a special file system such as /proc cannot hold output).' },
  EAGAIN: { code: 'RDK_IO', reason: 'the resource is temporarily unavailable', hint: 'Try again.' },
  ESPIPE: { code: 'RDK_IO', reason: 'the file cannot be read at an offset (a pipe or device)', hint: 'Give a regular file.' },
};

/** Words for an operation, from the system call that failed (for errors that come without one). */
const SYSCALL_WORDS: Record<string, string> = {
  open: 'opening',
  read: 'reading',
  write: 'writing',
  close: 'closing',
  mkdir: 'creating a folder',
  mkdtemp: 'creating a work folder',
  rmdir: 'removing a folder',
  unlink: 'removing a file',
  rm: 'removing',
  rename: 'renaming',
  scandir: 'listing a folder',
  stat: 'looking at',
  lstat: 'looking at',
  fstat: 'looking at',
  access: 'checking access to',
  chmod: 'setting the permissions of',
  chown: 'setting the owner of',
  fsync: 'flushing',
  ftruncate: 'truncating',
  copyfile: 'copying',
  link: 'linking',
  realpath: 'resolving',
  uv_os_homedir: 'finding the home folder',
};

/** The meaning of a Node system error, or null when `err` is not one (no string `code` starting with E). */
export function describeSystemError(err: unknown): SystemErrorMeaning | null {
  const errno = (err as NodeJS.ErrnoException | null)?.code;
  if (typeof errno !== 'string' || !/^E[A-Z0-9]+$/.test(errno)) return null;
  const m = MEANINGS[errno];
  if (m) return { ...m, errno };
  const text = (err as Error).message ?? errno;
  return { code: 'RDK_IO', errno, reason: text.replace(/^[A-Z0-9]+:\s*/, '').replace(/,\s*\w+ '.*'$/, ''), hint: 'See the reason above.' };
}

/** The operation that failed, in words, from a system error's `syscall` (or `fallback`). */
export function describeOperation(err: unknown, fallback: string): string {
  const sys = (err as NodeJS.ErrnoException | null)?.syscall;
  return (sys && SYSCALL_WORDS[sys]) ?? fallback;
}

/** The path a system error names, if any (`dest` for a rename's target). */
export function pathOfSystemError(err: unknown): string | undefined {
  const e = err as (NodeJS.ErrnoException & { dest?: string }) | null;
  return typeof e?.path === 'string' ? e.path : undefined;
}
