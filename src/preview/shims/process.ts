/** Preview bundle only: the few `process` members the core reads (environment switches), empty in a page. */
export const process = { env: {} as Record<string, string | undefined>, cwd: () => "/", platform: "browser", versions: {}, argv: [] as string[], stderr: { write: () => true }, stdout: { write: () => true } };
