"""Drawing a phase model as a state diagram (matplotlib, for the HTML report)."""

from __future__ import annotations

import networkx as nx
import numpy as np

__all__ = ["plot_phase_model"]


def plot_phase_model(model, ax=None, *, threshold=0.05, title=None):
    """Draw states as circles and transitions above ``threshold`` as arrows.

    Node labels show the state's name (label and dominant tokens) and the expected
    dwell time; node area grows with the expected occupancy; arrow width grows with
    the transition probability. Each state's most likely move to another state is
    drawn whatever its probability (see :meth:`PhaseModel.to_graph`).
    Self-transitions are not drawn (the dwell time says the same).

    Parameters
    ----------
    model : PhaseModel
    ax : matplotlib Axes, optional
        A new figure is created when omitted.
    threshold : float
        Smallest transition probability drawn.
    title : str, optional
        Defaults to the model label.

    Returns
    -------
    matplotlib.figure.Figure

    Examples
    --------
    >>> import matplotlib
    >>> matplotlib.use("Agg")
    >>> from seqmine.phases import PhaseModel
    >>> m = PhaseModel.from_parameters([1, 0], [[.7, .3], [.4, .6]], [[.9, .1], [.2, .8]],
    ...                                ["measure_height", "paint_pot"])
    >>> fig = plot_phase_model(m)
    >>> len(fig.axes)
    1
    >>> import matplotlib.pyplot as plt
    >>> plt.close(fig)
    """
    import matplotlib.pyplot as plt

    if ax is None:
        fig, ax = plt.subplots(figsize=(6, 5))
    else:
        fig = ax.figure
    graph = model.to_graph(threshold=threshold)
    pos = nx.circular_layout(graph) if model.n_states > 1 else {model.state_labels[0]: (0, 0)}
    occ = np.array([graph.nodes[n]["occupancy"] for n in graph.nodes])
    if np.any(occ < 0):  # occupancy unknown (model built by hand)
        occ = np.full(len(occ), 1.0 / max(len(occ), 1))
    sizes = 1800 + 5000 * occ
    nx.draw_networkx_nodes(graph, pos, ax=ax, node_size=sizes, node_color="#dfe9f3",
                           edgecolors="#34495e")
    labels = {n: f"{graph.nodes[n]['name'].replace(' ', chr(10), 1)}\n"
                 f"dwell {graph.nodes[n]['dwell']:.1f}" for n in graph.nodes}
    nx.draw_networkx_labels(graph, pos, labels=labels, ax=ax, font_size=8)
    edges = [(u, v) for u, v in graph.edges if u != v]
    widths = [0.5 + 6 * graph.edges[e]["probability"] for e in edges]
    nx.draw_networkx_edges(graph, pos, edgelist=edges, width=widths, ax=ax, arrows=True,
                           arrowsize=14, connectionstyle="arc3,rad=0.15",
                           node_size=sizes, edge_color="#7f8c8d")
    edge_labels = {e: f"{graph.edges[e]['probability']:.2f}" for e in edges}
    nx.draw_networkx_edge_labels(graph, pos, edge_labels=edge_labels, ax=ax, font_size=7,
                                 connectionstyle="arc3,rad=0.15")
    ax.set_title(title if title is not None else f"phase model: {model.label}")
    ax.set_axis_off()
    ax.margins(0.2)
    return fig
