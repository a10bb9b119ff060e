/** The default SQLite file name, in the working directory: the one place it is written. */
export const DEFAULT_SQLITE_PATH = 'roost.db';
