import type { Command } from "commander";
export function registerValidate(_program: Command): void {}
