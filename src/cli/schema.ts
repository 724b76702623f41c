import type { RegisterCommand } from "./commands.js";

/** `headroom schema` — not built yet; registers nothing. */
export const register: RegisterCommand = () => {};
