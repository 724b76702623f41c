import type { RegisterCommand } from "./commands.js";

/** `headroom batch` — not built yet; registers nothing. */
export const register: RegisterCommand = () => {};
