"""`tuikiln completion bash|zsh`: print a shell completion script made from tuikiln's own
argparse parser, so it always knows every command, option and choice of this version.

    tuikiln completion bash > ~/.local/share/bash-completion/completions/tuikiln
    tuikiln completion zsh > ~/.zfunc/tuikiln.zsh   # then `source` it from ~/.zshrc

Why generated rather than a library (argcomplete): no extra dependency, no Python start-up at
every Tab (the script is plain shell), and the parser stays the one place options are named.
zsh runs the same function through its bash compatibility layer (bashcompinit).
"""

from __future__ import annotations

import argparse
import importlib
import shlex
import sys
from dataclasses import dataclass, field

SHELLS = ("bash", "zsh")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("shell", choices=SHELLS, help="the shell to complete in")
    parser.epilog = ("install: tuikiln completion bash > "
                     "~/.local/share/bash-completion/completions/tuikiln (bash); "
                     "tuikiln completion zsh > ~/.zfunc/tuikiln.zsh and source it (zsh)")


@dataclass
class Level:
    """What can follow at one command level ("", "run", "sim serve")."""

    options: list[str] = field(default_factory=list)
    # option -> its choices (empty: any value, completed as a file name)
    values: dict[str, list[str]] = field(default_factory=dict)
    words: list[str] = field(default_factory=list)  # subcommands and positional choices
    subcommands: list[str] = field(default_factory=list)


def _read(parser: argparse.ArgumentParser, path: str, levels: dict[str, Level]) -> None:
    level = levels.setdefault(path, Level())
    for action in parser._actions:  # argparse keeps no public list of its actions
        if isinstance(action, argparse._SubParsersAction):
            for name, sub in action.choices.items():
                level.subcommands.append(name)
                level.words.append(name)
                _read(sub, f"{path} {name}".strip(), levels)
        elif action.option_strings:
            if action.help == argparse.SUPPRESS:
                continue  # hidden options stay hidden
            level.options.extend(action.option_strings)
            if action.nargs != 0:
                for option in action.option_strings:
                    level.values[option] = [str(c) for c in action.choices or ()]
        elif action.choices:
            level.words.extend(str(c) for c in action.choices)


def full_parser() -> argparse.ArgumentParser:
    """tuikiln's parser with every command's own arguments (the command line loads only
    the chosen command's). A command that cannot load is completed by name alone."""
    from tuikiln import cli

    parser = cli.build_parser()
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for name, sub in action.choices.items():
                try:
                    importlib.import_module(cli.COMMANDS[name]).add_arguments(sub)
                except Exception:  # a command still being written must not break the rest
                    continue
    return parser


def command_levels() -> dict[str, Level]:
    levels: dict[str, Level] = {}
    _read(full_parser(), "", levels)
    return levels


def _words(items: list[str]) -> str:
    return shlex.quote(" ".join(dict.fromkeys(items)))


def _key(path: str) -> str:
    return shlex.quote(path) if path else '""'


def _value_case(option: str, choices: list[str]) -> str:
    """After an option that takes a value: its choices, or nothing of ours (then the shell
    completes file names, `-o default`)."""
    if choices:
        return f'{option}) COMPREPLY=($(compgen -W {_words(choices)} -- "$cur")); return;;'
    return f"{option}) return;;"


def bash_script(levels: dict[str, Level]) -> str:
    into_subcommand, skip_value, per_level = [], [], []
    for path, level in levels.items():
        if level.subcommands:
            into_subcommand.append(
                f"            {_key(path)}) case \"$word\" in {'|'.join(level.subcommands)}) "
                f'path="${{path:+$path }}$word";; esac;;')
        if level.values:
            skip_value.append(f"                    {_key(path)}) case \"$word\" in "
                              f"{'|'.join(level.values)}) ((i++));; esac;;")
        # Every level lists the options every command takes (argparse parents).
        after_option = "\n".join(f"                {_value_case(o, c)}"
                                  for o, c in level.values.items())
        per_level.append(
            f"        {_key(path)})\n"
            f'            case "$prev" in\n{after_option}\n            esac\n'
            f'            if [[ "$cur" == -* ]]; then\n'
            f'                COMPREPLY=($(compgen -W {_words(level.options)} -- "$cur"))\n'
            f"            else\n"
            f'                COMPREPLY=($(compgen -W {_words(level.words)} -- "$cur"))\n'
            f"            fi;;")
    nl = "\n"
    return f"""# tuikiln completion for bash (and zsh through bashcompinit), generated by
# `tuikiln completion` from tuikiln's own parser: run it again after an upgrade.
# Where nothing of tuikiln's fits (a profile, a folder), the shell completes file names.
_tuikiln() {{
    local cur prev word path="" i
    cur="${{COMP_WORDS[COMP_CWORD]}}"
    prev="${{COMP_WORDS[COMP_CWORD-1]}}"
    # Which command (and subcommand) the line is in: skip options and their values.
    for ((i = 1; i < COMP_CWORD; i++)); do
        word="${{COMP_WORDS[i]}}"
        case "$word" in
            -*)
                case "$path" in
{nl.join(skip_value)}
                esac
                continue;;
        esac
        case "$path" in
{nl.join(into_subcommand)}
        esac
    done
    case "$path" in
{nl.join(per_level)}
    esac
}}
complete -o default -o bashdefault -F _tuikiln tuikiln
"""


def zsh_script(levels: dict[str, Level]) -> str:
    return ("# tuikiln completion for zsh: the bash function through zsh's bashcompinit.\n"
            "(( $+functions[compdef] )) || { autoload -U +X compinit && compinit; }\n"
            "autoload -U +X bashcompinit && bashcompinit\n" + bash_script(levels))


def run(args: argparse.Namespace) -> int:
    levels = command_levels()
    sys.stdout.write(bash_script(levels) if args.shell == "bash" else zsh_script(levels))
    return 0
