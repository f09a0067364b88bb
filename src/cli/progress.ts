/** A one-line progress bar on stderr when it is a terminal; silent otherwise (logs, CI, pipes). */
export function progressBar(label: string, stream: NodeJS.WriteStream = process.stderr): {
  update: (done: number, total: number) => void;
  finish: () => void;
} {
  if (!stream.isTTY) return { update: () => {}, finish: () => {} };
  let lastPercent = -1;
  return {
    update(done, total) {
      const percent = Math.floor((100 * done) / total);
      if (percent === lastPercent) return;
      lastPercent = percent;
      const width = 30;
      const filled = Math.round((width * done) / total);
      stream.write(`\r${label} [${'#'.repeat(filled)}${'.'.repeat(width - filled)}] ${percent}%`);
    },
    finish() {
      if (lastPercent >= 0) stream.write('\r\x1b[2K');
    },
  };
}
