import type { Command } from "commander";

/** Each command file exports one `register` that adds its command to the program. */
export type RegisterCommand = (program: Command) => void;

export const commands: RegisterCommand[] = [];
