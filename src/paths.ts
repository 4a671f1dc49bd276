/** The package's root directory (this file sits one level below it, in src/ or dist/). */
export const PACKAGE_ROOT: URL = new URL('..', import.meta.url);
