// Folders made for the user's output: made one level at a time after one bounded walk up the
// path, refused in one sentence where no file can live, and file-system failures in plain words.
import { mkdirSync, mkdtempSync, openSync, readFileSync, statSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { describeRefusedPath, FolderError, makeWritableFolder } from '../../src/files/writable-folder.ts';

const temp = (): string => mkdtempSync(join(tmpdir(), 'fringe-folder-'));

describe('makeWritableFolder', () => {
  it('makes every missing folder down to the one asked for, and accepts one that exists', () => {
    const base = temp();
    const dir = join(base, 'a', 'b', 'c');
    makeWritableFolder(dir);
    expect(statSync(dir).isDirectory()).toBe(true);
    expect(() => makeWritableFolder(dir)).not.toThrow();
  });

  it('refuses a path through a file, naming the file', () => {
    const base = temp();
    const file = join(base, 'plain-file');
    writeFileSync(file, 'x');
    for (const dir of [file, join(file, 'sub'), join(file, 'sub', 'deeper')]) {
      expect(() => makeWritableFolder(dir)).toThrow(FolderError);
      expect(() => makeWritableFolder(dir)).toThrow(`${file} is a file, not a folder`);
    }
    expect(readFileSync(file, 'utf8')).toBe('x');
  });

  it.runIf(process.platform === 'linux')('refuses the kernel pseudo file systems, existing folder or not', () => {
    // (Under /proc/fringe-test a recursive mkdir spins for ever: the command-line tests try that in a child with a time limit.)
    expect(() => makeWritableFolder('/proc')).toThrow(/cannot write in \/proc: \/proc is on the kernel's proc pseudo file system/);
    expect(() => makeWritableFolder('/sys/fringe-test')).toThrow(/sysfs pseudo file system/);
  });
});

describe('describeRefusedPath', () => {
  it('says an expected failure in plain words with its path, and leaves anything else alone', () => {
    const base = temp();
    const cases: [() => unknown, string][] = [
      [() => readFileSync(join(base, 'missing.json')), `cannot open ${join(base, 'missing.json')}: no such file or folder`],
      [() => openSync(base, 'w'), `cannot open ${base}: it is a folder`],
      [() => mkdirSync(base), `cannot make the folder ${base}: it already exists`],
    ];
    for (const [fail, sentence] of cases) {
      let error: unknown;
      try {
        fail();
      } catch (caught) {
        error = caught;
      }
      expect(describeRefusedPath(error)).toBe(sentence);
    }
    expect(describeRefusedPath(new TypeError('x is undefined'))).toBeUndefined();
    expect(describeRefusedPath(Object.assign(new Error('EMFILE'), { code: 'EMFILE', path: base }))).toBeUndefined();
    expect(describeRefusedPath(undefined)).toBeUndefined();
  });
});
