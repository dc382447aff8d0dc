/** `.proto` files imported as text (the loaders in tsup.config.ts and vitest.config.ts). */
declare module '*.proto' {
  const text: string;
  export default text;
}
