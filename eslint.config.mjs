// Lint for tendon: the recommended rules, exhaustive switches (a missing layer kind or activation
// is an error, not a silent default) and short functions. Formatting is prettier's job.
import js from '@eslint/js';
import globals from 'globals';
import tseslint from 'typescript-eslint';

export default tseslint.config(
  { ignores: ['dist/**', 'node_modules/**', 'bench/out/**', 'coverage/**'] },
  js.configs.recommended,
  ...tseslint.configs.recommended,
  {
    languageOptions: {
      parserOptions: { projectService: true, tsconfigRootDir: import.meta.dirname },
    },
  },
  {
    files: ['**/*.ts'],
    rules: {
      '@typescript-eslint/switch-exhaustiveness-check': ['error', { considerDefaultExhaustiveForUnions: false }],
      // Counted after formatting (prettier spreads long literals over lines): 110 lines is about
      // two screens, the most a reader takes in at once.
      'max-lines-per-function': ['error', { max: 110, skipBlankLines: true, skipComments: true }],
      '@typescript-eslint/no-unused-vars': ['error', { argsIgnorePattern: '^_', varsIgnorePattern: '^_' }],
    },
  },
  // Plain JavaScript scripts (bench, examples) are outside the TypeScript program.
  { files: ['**/*.mjs', '**/*.js'], ...tseslint.configs.disableTypeChecked },
  {
    files: ['**/*.mjs', '**/*.js'],
    languageOptions: { globals: { ...globals.node } },
  },
  {
    // A test is a list of cases, not a function to keep short.
    files: ['test/**'],
    rules: { 'max-lines-per-function': 'off' },
  },
);
