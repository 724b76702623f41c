import type { RegisterCommand } from "./commands.js";

/** `headroom check` — not built yet; registers nothing. */
export const register: RegisterCommand = () => {};
