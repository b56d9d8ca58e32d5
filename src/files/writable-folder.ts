/**
 * Folders and files a user names on the command line: made only where files can live, and every
 * expected failure of the file system said in plain words.
 *
 * What must stay true: making a folder never hangs and never recurses without bound. Node's
 * `mkdirSync(dir, { recursive: true })` spins for ever under /proc (ENOENT on every attempt),
 * so the walk here stats each ancestor once, up to the first one that exists, checks that one,
 * and then makes the missing folders one at a time.
 */
import { accessSync, constants, mkdirSync, statfsSync, statSync } from 'node:fs';
import { dirname, resolve, sep } from 'node:path';

/** A folder that cannot be made or written to: one sentence naming it; `reason` alone says why. */
export class FolderError extends Error {
  override name = 'FolderError';
  constructor(
    readonly dir: string,
    verb: 'make the folder' | 'write in',
    readonly reason: string,
  ) {
    super(`cannot ${verb} ${dir}: ${reason}`);
  }
}

/** Linux `statfs` magic numbers of kernel pseudo file systems (linux/magic.h): no place for files. */
const PSEUDO_FILE_SYSTEMS = new Map<number, string>([
  [0x9fa0, 'proc'],
  [0x62656572, 'sysfs'],
  [0x64626720, 'debugfs'],
  [0x74726163, 'tracefs'],
  [0x73636673, 'securityfs'],
  [0x27e0eb, 'cgroup'],
  [0x63677270, 'cgroup2'],
  [0x1cd1, 'devpts'],
  [0xcafe4a11, 'bpf'],
  [0x6165676c, 'pstore'],
  [0x62656570, 'configfs'],
  [0xde5e81e4, 'efivarfs'],
  [0x65735543, 'fusectl'],
  [0x42494e4d, 'binfmt_misc'],
]);

/** The error codes of a file system refusing a path, in plain words; undefined for anything else. */
const PLAIN_WORDS: Record<string, string> = {
  ENOENT: 'no such file or folder',
  EACCES: 'permission denied',
  EPERM: 'operation not permitted',
  ENOTDIR: 'a part of the path is a file, not a folder',
  EISDIR: 'it is a folder',
  ENOSPC: 'the disk is full',
  EDQUOT: 'the disk quota is used up',
  EROFS: 'the file system is read-only',
  EEXIST: 'it already exists',
  ENAMETOOLONG: 'the name is too long',
  ELOOP: 'too many symbolic links',
  EBUSY: 'it is busy',
  EIO: 'an input/output error',
};

/** The plain words for an expected file-system failure (by its `code`), or undefined for anything else. */
export function describeFileError(error: unknown): string | undefined {
  const code = (error as NodeJS.ErrnoException | undefined)?.code;
  return typeof code === 'string' ? PLAIN_WORDS[code] : undefined;
}

/** A message for any error met while writing or reading a file: plain words when expected. */
export function fileErrorReason(error: unknown): string {
  if (error instanceof FolderError) return error.reason;
  return describeFileError(error) ?? (error instanceof Error ? error.message : String(error));
}

const SYSCALL_VERBS: Record<string, string> = {
  mkdir: 'make the folder',
  open: 'open',
  read: 'read',
  stat: 'read',
  lstat: 'read',
  scandir: 'read the folder',
  access: 'use',
  write: 'write',
  rename: 'write',
  copyfile: 'write',
  unlink: 'remove',
};

/**
 * "cannot open PATH: it is a folder" for an expected file-system failure that names its path
 * (a path the user gave, refused); undefined for anything else, which is a bug to show whole.
 */
export function describeRefusedPath(error: unknown): string | undefined {
  const reason = describeFileError(error);
  const { path, syscall } = (error ?? {}) as NodeJS.ErrnoException;
  if (reason === undefined || typeof path !== 'string') return undefined;
  return `cannot ${SYSCALL_VERBS[syscall ?? ''] ?? 'use'} ${path}: ${reason}`;
}

/**
 * Makes `dir` (and its missing parents) unless it exists, after checking that the nearest
 * existing ancestor is a folder, writable, and on real storage. Throws {@link FolderError}.
 */
export function makeWritableFolder(dir: string): void {
  const target = resolve(dir);
  const missing: string[] = [];
  let at = target;
  const refuse = (reason: string): never => {
    throw new FolderError(dir, missing.length > 0 ? 'make the folder' : 'write in', reason);
  };
  // Bounded by the path's depth: each step goes one folder up.
  for (;;) {
    let stat;
    try {
      stat = statSync(at);
    } catch (error) {
      const code = (error as NodeJS.ErrnoException).code;
      // ENOTDIR: a file lies on the path; going up finds it and says so.
      if (code !== 'ENOENT' && code !== 'ENOTDIR') return refuse(`${fileErrorReason(error)} (${at})`);
      const parent = dirname(at);
      if (parent === at) return refuse(`${at} does not exist`);
      missing.unshift(at);
      at = parent;
      continue;
    }
    if (!stat.isDirectory()) return refuse(`${at} is a file, not a folder`);
    break;
  }
  const pseudo = pseudoFileSystem(at);
  if (pseudo !== undefined) return refuse(`${at} is on the kernel's ${pseudo} pseudo file system, not storage`);
  try {
    accessSync(at, constants.W_OK | constants.X_OK);
  } catch (error) {
    return refuse(`${fileErrorReason(error)} in ${at}`);
  }
  for (const folder of missing) {
    try {
      mkdirSync(folder);
    } catch (error) {
      // Made meanwhile by someone else: as good.
      if ((error as NodeJS.ErrnoException).code === 'EEXIST' && statSync(folder, { throwIfNoEntry: false })?.isDirectory()) continue;
      return refuse(`${fileErrorReason(error)} (${folder})`);
    }
  }
}

/** The pseudo file system `path` lies on, by its statfs type, or by name where statfs says nothing. */
function pseudoFileSystem(path: string): string | undefined {
  try {
    const name = PSEUDO_FILE_SYSTEMS.get(Number(statfsSync(path).type));
    if (name !== undefined) return name;
  } catch {
    // No statfs here: fall back on the usual mount points.
  }
  if (sep === '/') {
    for (const [root, name] of [['/proc', 'proc'], ['/sys', 'sysfs']] as const) if (path === root || path.startsWith(`${root}/`)) return name;
  }
  return undefined;
}
