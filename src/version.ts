/** Version of this package. */
export const VERSION_STRING = '0.1.0';
