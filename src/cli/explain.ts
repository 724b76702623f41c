import type { RegisterCommand } from "./commands.js";

/** `headroom explain` — not built yet; registers nothing. */
export const register: RegisterCommand = () => {};
